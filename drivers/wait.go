package drivers

import (
	"context"
	"time"
)

// Wait waits for d, or until ctx ends (then it returns ctx's error). A d of
// zero or less returns at once, with ctx's error if ctx has already ended.
// Drivers, simulated instruments and the scan engine all wait through it.
func Wait(ctx context.Context, d time.Duration) error {
	if d <= 0 {
		return ctx.Err()
	}
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}
