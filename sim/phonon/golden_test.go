package phonon

import (
	"encoding/json"
	"math"
	"os"
	"testing"

	"github.com/gliss-lab/gliss/sim/model"
)

// goldenCase is one row of testdata/brme_golden.json, written by
// reference/brme_golden.py from QuTiP's time-dependent brmesolve.
type goldenCase struct {
	Name         string  `json:"name"`
	FWHMPS       float64 `json:"fwhm_ps"`
	GDDPS2       float64 `json:"gdd_ps2"`
	AreaPi       float64 `json:"area_pi"`
	BindingMeV   float64 `json:"binding_mev"`
	DetuningMeV  float64 `json:"detuning_mev"`
	XLifetimePS  float64 `json:"x_lifetime_ps"`
	XXLifetimePS float64 `json:"xx_lifetime_ps"`
	AlphaPS2     float64 `json:"alpha_ps2"`
	CutoffMeV    float64 `json:"cutoff_mev"`
	TemperatureK float64 `json:"temperature_k"`
	G, X, XX     float64
	NX           float64 `json:"nx"`
	NXX          float64 `json:"nxx"`
	QutipSeconds float64 `json:"qutip_seconds"`
}

type goldenFile struct {
	Source string       `json:"source"`
	Cases  []goldenCase `json:"cases"`
}

func loadGolden(t testing.TB) goldenFile {
	t.Helper()
	b, err := os.ReadFile("testdata/brme_golden.json")
	if err != nil {
		t.Fatal(err)
	}
	var g goldenFile
	if err := json.Unmarshal(b, &g); err != nil {
		t.Fatalf("brme_golden.json: %v", err)
	}
	if len(g.Cases) < 16 {
		t.Fatalf("brme_golden.json has %d cases, want at least 16", len(g.Cases))
	}
	return g
}

func (c *goldenCase) params() (model.Params, Bath) {
	return model.Params{
			FWHMPS: c.FWHMPS, GDDPS2: c.GDDPS2, AreaPi: c.AreaPi,
			BindingMeV: c.BindingMeV, DetuningMeV: c.DetuningMeV,
			XLifetimePS: c.XLifetimePS, XXLifetimePS: c.XXLifetimePS,
		}, Bath{
			AlphaPS2: c.AlphaPS2, CutoffMeV: c.CutoffMeV, TemperatureK: c.TemperatureK,
		}
}

// TestGoldenBrmesolve matches every population and yield of the golden file
// to 2e-3. Source of the values: QuTiP 4.7 brmesolve, time-dependent,
// secular (sec_cutoff 0.1), atol 1e-10, rtol 1e-8 (reference/brme_golden.py).
func TestGoldenBrmesolve(t *testing.T) {
	g := loadGolden(t)
	s := NewSolver()
	var worst float64
	for _, c := range g.Cases {
		p, b := c.params()
		r, err := s.Solve(p, &b)
		if err != nil {
			t.Fatalf("%s: %v", c.Name, err)
		}
		for _, q := range []struct {
			name      string
			got, want float64
		}{
			{"G", r.G, c.G}, {"X", r.X, c.X}, {"XX", r.XX, c.XX},
			{"NX", r.NX, c.NX}, {"NXX", r.NXX, c.NXX},
		} {
			d := math.Abs(q.got - q.want)
			worst = math.Max(worst, d)
			if d > 2e-3 {
				t.Errorf("%s: %s = %.6f, QuTiP brmesolve %.6f (|d| %.1e > 2e-3)", c.Name, q.name, q.got, q.want, d)
			}
		}
	}
	t.Logf("%d cases, largest difference from brmesolve %.2e", len(g.Cases), worst)
}
