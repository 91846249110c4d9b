package cryostat

import (
	"context"
	"errors"
	"testing"
	"time"

	"github.com/gliss-lab/gliss/drivers"
)

// FuzzSetpointAndWait feeds arbitrary setpoints and stability arguments (as a
// scan's temperature axis carries them): a setpoint is accepted exactly when
// it is inside the range, otherwise ErrLimit; stability arguments are
// accepted exactly when CheckStability accepts them, and then the wait
// returns nil or a StabilityError, never anything else.
func FuzzSetpointAndWait(f *testing.F) {
	f.Add(8.0, 0.05, int64(time.Minute), int64(20*time.Minute))
	f.Add(0.0, 0.0, int64(0), int64(0))
	f.Add(300.0, -1.0, int64(-5), int64(1))
	f.Add(1.5, 1e-9, int64(time.Hour), int64(time.Second))
	f.Fuzz(func(t *testing.T, k, tol float64, hold, timeout int64) {
		clk := newManual()
		c, err := New(Options{Clock: clk, Seed: 1})
		if err != nil {
			t.Fatal(err)
		}
		ctx := context.Background()
		err = c.SetSetpointK(ctx, k)
		inRange := k >= 1.5 && k <= 300
		if inRange != (err == nil) || (err != nil && !errors.Is(err, drivers.ErrLimit)) {
			t.Fatalf("setpoint %g: %v", k, err)
		}
		h, to := time.Duration(hold), time.Duration(timeout)
		if to > 2*time.Hour {
			to = 2 * time.Hour // bound the simulated polling
		}
		werr := c.WaitStable(ctx, tol, h, to)
		if CheckStability(tol, h, to) != nil {
			if werr == nil {
				t.Fatalf("tol %g hold %v timeout %v: accepted", tol, h, to)
			}
			return
		}
		var se *StabilityError
		if werr != nil && !errors.As(werr, &se) {
			t.Fatalf("tol %g hold %v timeout %v: %v", tol, h, to, werr)
		}
	})
}
