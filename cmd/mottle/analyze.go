package main

import (
	"context"
	"errors"
)

// runAnalyze is a placeholder until the analyze command lands.
func runAnalyze(ctx context.Context, e *env, args []string) error {
	return errors.New("not built yet")
}
