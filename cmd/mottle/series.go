package main

import (
	"context"
	"errors"
)

// runSeries is a placeholder until the series command lands.
func runSeries(ctx context.Context, e *env, args []string) error {
	return errors.New("not built yet")
}
