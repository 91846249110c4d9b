package calib

import (
	"errors"
	"math"
	"testing"
)

func TestStretcherCheckValue(t *testing.T) {
	// PHYSICS.md §4 check (Treacy, IEEE J. Quantum Electron. QE-5, 454 (1969);
	// Martinez, QE-23, 59 (1987)): 1800 lines/mm, 780 nm, Littrow, N = 2,
	// k = 2, 875 mm of travel → 18.8 ps² (±0.1).
	s := Stretcher{LinesPerMM: 1800, WavelengthNM: 780, Littrow: true, Passes: 2, Lever: 2}
	g, err := s.GDDPS2(875)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(g-18.8) > 0.1 {
		t.Errorf("GDD(875 mm) = %.4f ps², want 18.8 ± 0.1", g)
	}
	// The same angle given explicitly as the incidence reproduces Littrow.
	th, _ := s.DiffractionDeg()
	s2 := s
	s2.Littrow, s2.IncidenceDeg = false, th
	g2, err := s2.GDDPS2(875)
	if err != nil || math.Abs(g2-g) > 1e-9 {
		t.Errorf("explicit incidence %.4f°: GDD %.6f, want %.6f (err %v)", th, g2, g, err)
	}
}

func TestStretcherDemo(t *testing.T) {
	// PHYSICS.md, demo dot (invented stretcher, the document's own figures):
	// 1800 lines/mm in Littrow at 785 nm, N = 4, k = 2, zero at 600 mm on a
	// 1200 mm stage → 0.04433 ps²/mm and ±26.6 ps² over the travel.
	s := Stretcher{LinesPerMM: 1800, WavelengthNM: 785, IncidenceDeg: math.NaN(), Passes: 4, Lever: 2, ZeroMM: 600}
	k, err := s.SlopePS2PerMM()
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(k-0.04433) > 0.000005 {
		t.Errorf("slope %.6f ps²/mm, want 0.04433", k)
	}
	for _, c := range []struct{ mm, want float64 }{{0, -26.6}, {1200, 26.6}, {600, 0}} {
		g, _ := s.GDDPS2(c.mm)
		if math.Abs(g-c.want) > 0.05 {
			t.Errorf("GDD(%g mm) = %.3f, want %.1f", c.mm, g, c.want)
		}
		x, _ := s.PositionMM(g)
		if math.Abs(x-c.mm) > 1e-9 {
			t.Errorf("PositionMM(GDD(%g)) = %g", c.mm, x)
		}
	}
	s.Sign = -1
	if g, _ := s.GDDPS2(1200); g > -26.5 {
		t.Errorf("sign -1: GDD(1200 mm) = %g, want ≈ -26.6", g)
	}
}

func TestStretcherErrors(t *testing.T) {
	// 1800 lines/mm cannot diffract 1200 nm in Littrow (mλ/2d = 1.08 > 1).
	if _, err := (Stretcher{LinesPerMM: 1800, WavelengthNM: 1200, Littrow: true, Passes: 1, Lever: 1}).SlopePS2PerMM(); err == nil {
		t.Error("no Littrow angle: want an error")
	}
	if _, err := (Stretcher{LinesPerMM: 1800, WavelengthNM: 780, Littrow: true, Passes: 0, Lever: 1}).SlopePS2PerMM(); err == nil {
		t.Error("0 passes: want an error")
	}
	if err := (Stretcher{LinesPerMM: 1800, WavelengthNM: 780, Littrow: true, Passes: 2, Lever: 2, Sign: 3}).Validate(); err == nil {
		t.Error("sign 3: want a validation error")
	}
}

func TestEnergyCheckValues(t *testing.T) {
	// PHYSICS.md §6: ΔE ≈ hc·Δλ/λ²; 1.9 nm at 780, 790, 800 nm → 3.87, 3.77,
	// 3.68 meV (±0.01), hc from CODATA 2018.
	for _, c := range []struct{ at, want float64 }{{780, 3.87}, {790, 3.77}, {800, 3.68}} {
		got := SplittingMeV(1.9, c.at)
		if math.Abs(got-c.want) > 0.01 {
			t.Errorf("1.9 nm at %g nm = %.4f meV, want %.2f ± 0.01", c.at, got, c.want)
		}
		if back := SplittingNM(got, c.at); math.Abs(back-1.9) > 1e-12 {
			t.Errorf("back to nm: %g, want 1.9", back)
		}
	}
	// E = hc/λ: 1239.84198 eV·nm / 785 nm = 1579.41 meV (CODATA 2018 hc).
	if e := EnergyMeV(785); math.Abs(e-1579.4165) > 0.001 {
		t.Errorf("E(785 nm) = %.4f meV", e)
	}
}

func TestDetuning(t *testing.T) {
	// A laser 0.1 nm to the blue of a 785 nm two-photon resonance is detuned
	// by hc·0.1/785² ≈ +0.201 meV per photon (§6 formula).
	d := DetuningMeV(784.9, 785)
	if math.Abs(d-SplittingMeV(0.1, 785)) > 0.001 || d <= 0 {
		t.Errorf("detuning %g meV, want ≈ %g", d, SplittingMeV(0.1, 785))
	}
	if l := LaserNM(d, 785); math.Abs(l-784.9) > 1e-9 {
		t.Errorf("LaserNM = %.12f, want 784.9", l)
	}
}

func TestMalusInverse(t *testing.T) {
	m := Malus{PMinUW: 0.05, PMaxUW: 200, Theta0Deg: 12}
	for _, p := range []float64{0.05, 0.5, 10, 100, 199.9, 200} {
		a, err := m.AngleDeg(p)
		if err != nil {
			t.Fatal(err)
		}
		if got := m.PowerUW(a); math.Abs(got-p) > 1e-9*p+1e-12 {
			t.Errorf("PowerUW(AngleDeg(%g)) = %g", p, got)
		}
	}
	if _, err := m.AngleDeg(250); !errors.Is(err, ErrRange) {
		t.Errorf("250 µW: err %v, want ErrRange", err)
	}
}

// A power has four angles per half turn of the plate (Malus's law,
// P = Pmin + (Pmax − Pmin)·cos²(2(θ − θ0)); Hecht, Optics, 5th ed., §8.2);
// the one within the attenuator's limits is used.
func TestMalusAngleWithin(t *testing.T) {
	m := Malus{PMinUW: 0.05, PMaxUW: 200, Theta0Deg: 40}
	cases := []struct {
		uw, lo, hi float64
		want       float64 // NaN: none in range
	}{
		// 100 µW: cos² = 0.49987…, a ≈ 22.504°: θ0 + a ≈ 62.5° is outside [0, 60]; θ0 − a is inside.
		{100, 0, 60, 40 - 22.5040},
		{100, 0, 90, 40 + 22.5040},        // the usual branch when it fits
		{100, 70, 130, 40 - 22.5040 + 90}, // the next half turn
		{100, 63, 107, math.NaN()},        // 62.5° and 107.5° just miss
		{200, 0, 30, math.NaN()},          // only 40° + k·90° gives full power
		{200, 120, 140, 130},
	}
	for _, c := range cases {
		got, err := m.AngleWithinDeg(c.uw, c.lo, c.hi)
		if math.IsNaN(c.want) {
			if !errors.Is(err, ErrRange) {
				t.Errorf("%g µW in [%g, %g]°: %v, %v; want ErrRange", c.uw, c.lo, c.hi, got, err)
			}
			continue
		}
		if err != nil || math.Abs(got-c.want) > 1e-3 || got < c.lo || got > c.hi {
			t.Errorf("%g µW in [%g, %g]°: %.4f°, %v; want %.4f°", c.uw, c.lo, c.hi, got, err, c.want)
			continue
		}
		if p := m.PowerUW(got); math.Abs(p-c.uw) > 1e-9*c.uw {
			t.Errorf("%g µW in [%g, %g]°: PowerUW(%.4f°) = %g", c.uw, c.lo, c.hi, got, p)
		}
	}
	// An ND wheel has one angle: in the range or an error.
	nd := Attenuator{ND: &NDWheel{P0UW: 200, ODPerDeg: 0.01, MinDeg: 0, MaxDeg: 300}}
	if _, err := nd.AngleWithinDeg(2, 0, 100); !errors.Is(err, ErrRange) {
		t.Errorf("ND wheel, 2 µW (at 200°) within 0–100°: %v, want ErrRange", err)
	}
	if deg, err := nd.AngleWithinDeg(2, 0, 250); err != nil || math.Abs(deg-200) > 1e-9 {
		t.Errorf("ND wheel, 2 µW within 0–250°: %v°, %v; want 200°", deg, err)
	}
}
