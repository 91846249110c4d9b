package bench

import (
	"math"
	"testing"

	"github.com/gliss-lab/gliss/drivers/calib"
)

// The counter computes the true GDD with the stretcher's line (slope
// computed once): it must give the Stretcher's own numbers bit for bit, so
// that caching the slope changes no count.
func TestStretcherLineExact(t *testing.T) {
	for _, s := range []calib.Stretcher{
		DemoStretcher(),
		// PHYSICS.md §4 check stretcher (Treacy 1969): 1800 lines/mm, 780 nm,
		// Littrow, N = 2, k = 2; with an explicit zero and sign.
		{LinesPerMM: 1800, WavelengthNM: 780, Littrow: true, Passes: 2, Lever: 2, ZeroMM: 37.5, Sign: -1},
	} {
		l, err := s.Line()
		if err != nil {
			t.Fatal(err)
		}
		k, err := s.SlopePS2PerMM()
		if err != nil {
			t.Fatal(err)
		}
		for _, mm := range []float64{0, 0.001, 123.456, 600, 875, 1199.999, 1200} {
			// The law as computed per call before the slope was cached.
			want := k * (mm - s.ZeroMM)
			g, _ := s.GDDPS2(mm)
			if lg := l.GDDPS2(mm); lg != want || g != want || math.IsNaN(lg) {
				t.Errorf("GDD(%g mm): line %v, stretcher %v, want %v", mm, lg, g, want)
			}
			wantMM := s.ZeroMM + want/k
			x, _ := s.PositionMM(want)
			if lx := l.PositionMM(want); lx != wantMM || x != wantMM {
				t.Errorf("PositionMM(%g ps²): line %v, stretcher %v, want %v", want, lx, x, wantMM)
			}
		}
	}
	// 1800 lines/mm cannot diffract 1200 nm in Littrow (mλ/2d = 1.08 > 1).
	bad := calib.Stretcher{LinesPerMM: 1800, WavelengthNM: 1200, Littrow: true, Passes: 2, Lever: 2}
	if _, err := bad.Line(); err == nil {
		t.Error("Line of a stretcher without a Littrow angle: no error")
	}
}
