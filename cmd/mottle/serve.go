package main

import (
	"context"
	"errors"
)

// runServe is a placeholder until the serve command lands.
func runServe(ctx context.Context, e *env, args []string) error {
	return errors.New("not built yet")
}
