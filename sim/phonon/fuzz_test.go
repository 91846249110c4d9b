package phonon

import (
	"math"
	"testing"

	"github.com/gliss-lab/gliss/sim/model"
)

// FuzzBath feeds arbitrary bath values (as they come from the CLI flags
// --phonon-alpha-ps2, --phonon-cutoff-mev, --temperature-k): Validate either
// refuses them or Solve returns finite populations that sum to 1.
func FuzzBath(f *testing.F) {
	f.Add(0.03, 1.2, 4.2, 20.0, 8.0)
	f.Add(0.0, 0.0, 0.0, -5.0, 1.0)
	f.Add(1.0, 20.0, 400.0, 0.0, 14.0)
	f.Add(1e-9, 0.01, 0.0, 26.0, 0.5)
	f.Add(math.NaN(), 1.0, 4.0, 1.0, 1.0)
	s := NewSolver()
	f.Fuzz(func(t *testing.T, alpha, cutoff, tempK, gdd, area float64) {
		b := Bath{AlphaPS2: alpha, CutoffMeV: cutoff, TemperatureK: tempK}
		p := model.DemoParams()
		p.GDDPS2, p.AreaPi = gdd, area
		p.Tolerance = 1e-6
		if p.Validate() != nil || math.Abs(gdd) > 30 || area > 15 {
			return // the plain model's ranges are its own business; keep points cheap
		}
		if b.Validate() != nil {
			if _, err := s.Solve(p, &b); err == nil {
				t.Fatalf("%+v: Validate refused it, Solve did not", b)
			}
			return
		}
		r, err := s.Solve(p, &b)
		if err != nil {
			t.Fatalf("%+v: %v", b, err)
		}
		sum := r.G + r.X + r.XX
		for _, v := range []float64{r.G, r.X, r.XX, r.NX, r.NXX} {
			if math.IsNaN(v) || math.IsInf(v, 0) || v < -1e-4 || v > 1.5 {
				t.Fatalf("%+v: result %+v", b, r)
			}
		}
		if math.Abs(sum-1) > 1e-4 {
			t.Fatalf("%+v: populations sum to %v", b, sum)
		}
	})
}
