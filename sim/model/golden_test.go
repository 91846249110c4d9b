package model

import (
	"encoding/json"
	"math"
	"os"
	"testing"
)

// TestQuTiPGolden matches every value of testdata/qutip_golden.json to 1e-4.
// The file is written by reference/qutip_golden.py with qutip.mesolve (the
// independent reference of PHYSICS.md §2) at atol 1e-11, rtol 1e-9;
// reference/check_golden.sh regenerates it and checks it in CI.
func TestQuTiPGolden(t *testing.T) {
	raw, err := os.ReadFile("testdata/qutip_golden.json")
	if err != nil {
		t.Fatal(err)
	}
	var doc struct {
		Cases []goldenCase `json:"cases"`
	}
	if err := json.Unmarshal(raw, &doc); err != nil {
		t.Fatal(err)
	}
	if len(doc.Cases) < 40 {
		t.Fatalf("golden file has %d cases, want at least 40", len(doc.Cases))
	}
	s := NewSolver()
	for _, tol := range []float64{0, 1e-11} {
		worst := compareGolden(t, s, doc.Cases, tol)
		t.Logf("tolerance %g: %d cases, largest |gliss − QuTiP| = %.2g", tol, len(doc.Cases), worst)
	}
}

type goldenCase = struct {
	Params struct {
		FWHMPS       float64 `json:"fwhm_ps"`
		GDDPS2       float64 `json:"gdd_ps2"`
		AreaPi       float64 `json:"area_pi"`
		BindingMeV   float64 `json:"binding_mev"`
		DetuningMeV  float64 `json:"detuning_mev"`
		XLifetimePS  float64 `json:"x_lifetime_ps"`
		XXLifetimePS float64 `json:"xx_lifetime_ps"`
	} `json:"params"`
	Result struct {
		G   float64 `json:"g"`
		X   float64 `json:"x"`
		XX  float64 `json:"xx"`
		NX  float64 `json:"n_x"`
		NXX float64 `json:"n_xx"`
	} `json:"result"`
}

func compareGolden(t *testing.T, s *Solver, cases []goldenCase, tol float64) (worst float64) {
	for i, c := range cases {
		cp := c.Params
		p := Params{FWHMPS: cp.FWHMPS, GDDPS2: cp.GDDPS2, AreaPi: cp.AreaPi, BindingMeV: cp.BindingMeV,
			DetuningMeV: cp.DetuningMeV, XLifetimePS: cp.XLifetimePS, XXLifetimePS: cp.XXLifetimePS, Tolerance: tol}
		r, err := s.Solve(p)
		if err != nil {
			t.Fatalf("case %d %+v: %v", i, p, err)
		}
		for _, v := range []struct {
			name      string
			got, want float64
		}{
			{"g", r.G, c.Result.G}, {"x", r.X, c.Result.X}, {"xx", r.XX, c.Result.XX},
			{"n_x", r.NX, c.Result.NX}, {"n_xx", r.NXX, c.Result.NXX},
		} {
			d := math.Abs(v.got - v.want)
			worst = max(worst, d)
			if d > 1e-4 {
				t.Errorf("case %d %+v: %s = %.8f, QuTiP %.8f (|diff| %.2g > 1e-4)", i, p, v.name, v.got, v.want, d)
			}
		}
	}
	return worst
}
