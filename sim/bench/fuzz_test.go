package bench

import (
	"context"
	"errors"
	"math"
	"testing"

	"github.com/gliss-lab/gliss/drivers"
)

// FuzzStageMove feeds arbitrary targets (outside input: a scan's positions,
// a CLI flag) to the stage: either the move is refused with ErrLimit and the
// stage stays put, or it arrives within the travel, near the target.
func FuzzStageMove(f *testing.F) {
	for _, v := range []float64{0, 1200, 600, -1e-300, 1200.0000001, math.NaN(), math.Inf(1), 1e308, 537.25} {
		f.Add(v, 45.0, 0.0)
	}
	b, err := New(Options{Seed: 1, Instant: true})
	if err != nil {
		f.Fatal(err)
	}
	f.Cleanup(func() { b.Close() })
	ctx := context.Background()
	f.Fuzz(func(t *testing.T, mm, deg, mev float64) {
		check := func(name string, target, lo, hi, tol float64, move func() error, read func() (float64, error)) {
			before, err := read()
			if err != nil {
				t.Fatal(err)
			}
			err = move()
			after, rerr := read()
			if rerr != nil {
				t.Fatal(rerr)
			}
			inside := target >= lo && target <= hi // false for NaN
			switch {
			case inside && err != nil:
				t.Fatalf("%s to %g inside [%g, %g]: %v", name, target, lo, hi, err)
			case !inside && !errors.Is(err, drivers.ErrLimit):
				t.Fatalf("%s to %g outside [%g, %g]: %v, want ErrLimit", name, target, lo, hi, err)
			case !inside && after != before:
				t.Fatalf("%s to %g refused, yet moved from %g to %g", name, target, before, after)
			case inside && (after < lo || after > hi || math.Abs(after-target) > tol):
				t.Fatalf("%s to %g arrived at %g", name, target, after)
			}
		}
		check("stage", mm, 0, 1200, 10*stageRepeatMM,
			func() error { return b.Stage().MoveToMM(ctx, mm) },
			func() (float64, error) { return b.Stage().PositionMM(ctx) })
		check("attenuator", deg, 0, 360, 10*angleRepeatDeg,
			func() error { return b.Attenuator().SetAngleDeg(ctx, deg) },
			func() (float64, error) { return b.Attenuator().AngleDeg(ctx) })
		check("laser", mev, -2, 2, 10*detuningRepeatMeV,
			func() error { return b.Laser().SetDetuningMeV(ctx, mev) },
			func() (float64, error) { return b.Laser().DetuningMeV(ctx) })
	})
}
