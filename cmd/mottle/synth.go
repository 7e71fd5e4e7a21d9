package main

import (
	"context"
	"errors"
)

// runSynth is a placeholder until the synth command lands.
func runSynth(ctx context.Context, e *env, args []string) error {
	return errors.New("not built yet")
}
