package phonon

import (
	"testing"

	"github.com/gliss-lab/gliss/sim/model"
)

// Facts of the trade of PHYSICS.md §7 (common practice, no published source),
// asserted on the demo dot (model.DemoParams, DemoBath at other temperatures).
//
// Which chirp sign keeps the plateau: positive GDD (up-chirp). In the frame
// of PHYSICS.md §2 the diagonal of H/ħ is 0, E_B/2ħ − a·t, −2a·t; for a > 0
// the ground state G is the lowest level at t → −∞ and XX the lowest at
// t → +∞, so adiabatic passage G → XX follows the lowest dressed state. A cold
// bath can only take energy (phonon emission), and there is no lower dressed
// state to emit into, so the plateau survives. For a < 0 the passage follows
// the highest dressed state, and phonon emission, stronger as the power widens
// the dressed splitting towards ħωc, drains it.

func demoAt(gdd, area float64) model.Params {
	p := model.DemoParams()
	p.GDDPS2, p.AreaPi = gdd, area
	return p
}

func solveT(t *testing.T, s *Solver, p model.Params, tempK float64) model.Result {
	t.Helper()
	b := DemoBath()
	b.TemperatureK = tempK
	r, err := s.Solve(p, &b)
	if err != nil {
		t.Fatal(err)
	}
	return r
}

// TestTradeColdPlateauSign: at 0.3 K the plateau sign gives the phonon-free
// map (≤ 1e-3 apart) on the plateau, while the other sign loses at least 0.5
// of the biexciton yield at high power.
//
// The ≤ 1e-3 holds for the demo dot's pulse and binding energy with the
// radiative decay off. With the demo's decay on (τ_XX 130 ps against a pulse
// of ±6τ ≈ ±110 ps at 20 ps²) the difference is about 0.5–2 % — an effect of
// the model, not of the solver (the golden cases with decay agree with QuTiP
// to 1e-5): a biexciton that decays during the pulse leaves the lowest dressed
// state, and phonon emission brings it back, so the cold bath raises the yield
// slightly. That is asserted too (0 < gain ≤ 3e-2).
func TestTradeColdPlateauSign(t *testing.T) {
	s := NewSolver()
	for _, gdd := range []float64{20, 26} {
		for _, area := range []float64{8, 10, 12, 14} {
			p := demoAt(gdd, area)
			p.XLifetimePS, p.XXLifetimePS = 0, 0
			free, _ := model.Solve(p)
			r := solveT(t, s, p, 0.3)
			if d := maxDiff(r, free); d > 1e-3 {
				t.Errorf("0.3 K, +%g ps², %gπ, no decay: %+v, phonon-free %+v (|d| %.1e > 1e-3)", gdd, area, r, free, d)
			}
			pd := demoAt(gdd, area)
			freeD, _ := model.Solve(pd)
			rd := solveT(t, s, pd, 0.3)
			if gain := rd.NXX - freeD.NXX; !(gain > 0 && gain <= 3e-2) {
				t.Errorf("0.3 K, +%g ps², %gπ, demo decay: phonon gain in NXX %.2e, want in (0, 3e-2]", gdd, area, gain)
			}
		}
	}
	for _, area := range []float64{10, 12, 14} {
		p := demoAt(-20, area)
		free, _ := model.Solve(p)
		r := solveT(t, s, p, 0.3)
		if loss := free.NXX - r.NXX; loss < 0.5 {
			t.Errorf("0.3 K, −20 ps², %gπ: NXX %.4f, phonon-free %.4f: loss %.3f < 0.5", area, r.NXX, free.NXX, loss)
		}
	}
}

// TestTradeFourKelvin: at 4 K the plateau sign keeps a biexciton yield ≥ 0.8
// over the high-power part of the map.
func TestTradeFourKelvin(t *testing.T) {
	s := NewSolver()
	for _, gdd := range []float64{15, 20, 26} {
		for _, area := range []float64{8, 10, 12, 14} {
			r := solveT(t, s, demoAt(gdd, area), 4)
			if r.NXX < 0.8 {
				t.Errorf("4 K, +%g ps², %gπ: NXX %.4f < 0.8", gdd, area, r.NXX)
			}
		}
	}
}

// TestTradeFortyKelvin: at 40 K both signs are clearly (≥ 0.2) below their
// 4 K values where both still have a plateau at 4 K (6π, the onset of the
// plateau). At the highest powers the negative sign is already drained at
// 4 K (NXX ≈ 0.15 at 14π) and warming moves it towards the thermal mixture of
// dressed states instead; that is the model's behaviour, not asserted here.
func TestTradeFortyKelvin(t *testing.T) {
	s := NewSolver()
	for _, gdd := range []float64{-20, 20} {
		for _, area := range []float64{5, 6} {
			p := demoAt(gdd, area)
			cold := solveT(t, s, p, 4)
			warm := solveT(t, s, p, 40)
			if drop := cold.NXX - warm.NXX; drop < 0.2 {
				t.Errorf("%+g ps², %gπ: NXX %.4f at 4 K, %.4f at 40 K: drop %.3f < 0.2", gdd, area, cold.NXX, warm.NXX, drop)
			}
		}
	}
}
