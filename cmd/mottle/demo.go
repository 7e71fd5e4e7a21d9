package main

import (
	"context"
	"errors"
)

// runDemo is a placeholder until the demo command lands.
func runDemo(ctx context.Context, e *env, args []string) error {
	return errors.New("not built yet")
}
