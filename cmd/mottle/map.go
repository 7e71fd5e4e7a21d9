package main

import (
	"context"
	"errors"
)

// runMap is a placeholder until the map command lands.
func runMap(ctx context.Context, e *env, args []string) error {
	return errors.New("not built yet")
}
