package calib

import (
	"math"
	"testing"
)

func TestChirpedPulseCheck(t *testing.T) {
	// PHYSICS.md §1 check (Diels & Rudolph, Ultrashort Laser Pulse Phenomena,
	// 2nd ed., ch. 1): F = 2 ps, φ2 = 20 ps² → chirped intensity FWHM 27.80 ps.
	if f := ChirpedFWHMPS(2, 20); math.Abs(f-27.80) > 0.005 {
		t.Errorf("FWHM = %.4f ps, want 27.80", f)
	}
	g, err := GDDFromFWHMPS(2, ChirpedFWHMPS(2, -20))
	if err != nil || math.Abs(g-20) > 1e-9 {
		t.Errorf("|GDD| back = %g (err %v), want 20", g, err)
	}
	if _, err := GDDFromFWHMPS(2, 1.9); err == nil {
		t.Error("shorter than the transform limit: want an error")
	}
}

type stretcherGolden struct {
	StageMM []float64          `json:"stage_mm"`
	FWHMPS  []float64          `json:"fwhm_ps"`
	Fit     map[string]float64 `json:"fit"`
	Sigma   map[string]float64 `json:"sigma"`
	True    map[string]float64 `json:"true"`
	RMSPS   float64            `json:"rms_ps"`
	KnownTL struct {
		TLFWHMPS float64            `json:"tl_fwhm_ps"`
		Fit      map[string]float64 `json:"fit"`
		Sigma    map[string]float64 `json:"sigma"`
	} `json:"known_tl"`
}

func TestFitStretcherMatchesSciPy(t *testing.T) {
	// testdata/stretcher_scipy.json from reference/stretcher_scipy.py.
	var g stretcherGolden
	readJSON(t, "testdata/stretcher_scipy.json", &g)
	f, err := FitStretcher(g.StageMM, g.FWHMPS)
	if err != nil {
		t.Fatal(err)
	}
	relClose(t, "slope", f.SlopePS2PerMM, g.Fit["slope_ps2_per_mm"], 1e-6)
	relClose(t, "zero_mm", f.ZeroMM, g.Fit["zero_mm"], 1e-6)
	relClose(t, "tl_fwhm_ps", f.TLFWHMPS, g.Fit["tl_fwhm_ps"], 1e-6)
	relClose(t, "sigma slope", f.SigmaSlopePS2PerMM, g.Sigma["slope_ps2_per_mm"], 1e-4)
	relClose(t, "sigma zero", f.SigmaZeroMM, g.Sigma["zero_mm"], 1e-4)
	relClose(t, "sigma tl", f.SigmaTLFWHMPS, g.Sigma["tl_fwhm_ps"], 1e-4)
	relClose(t, "rms", f.RMS, g.RMSPS, 1e-6)
	// And the truth the readings were drawn from lies within 3σ. (The seed
	// 4433 tried first drew ±3σ noise at both ends of the travel and put x0
	// 3.3σ off; a Monte Carlo over 300 seeds with SciPy gave z-scores of x0
	// with mean 0.10 and standard deviation 1.10, 1.3 % beyond 3σ, so the
	// script now uses seed 785.)
	for _, c := range []struct {
		name           string
		got, sig, want float64
	}{
		{"slope", f.SlopePS2PerMM, f.SigmaSlopePS2PerMM, g.True["slope_ps2_per_mm"]},
		{"zero", f.ZeroMM, f.SigmaZeroMM, g.True["zero_mm"]},
		{"tl", f.TLFWHMPS, f.SigmaTLFWHMPS, g.True["tl_fwhm_ps"]},
	} {
		if math.Abs(c.got-c.want) > 3*c.sig {
			t.Errorf("%s = %g ± %g, true %g: off by more than 3σ", c.name, c.got, c.sig, c.want)
		}
	}
	// Applying the fit to the demo geometry gives the fitted slope and zero.
	geom := Stretcher{LinesPerMM: 1800, WavelengthNM: 785, Littrow: true, Passes: 4, Lever: 2, ZeroMM: 0}
	s, err := f.Apply(geom, -1)
	if err != nil {
		t.Fatal(err)
	}
	k, _ := s.SlopePS2PerMM()
	if math.Abs(k+f.SlopePS2PerMM) > 1e-12 || s.ZeroMM != f.ZeroMM {
		t.Errorf("applied: slope %g zero %g, want %g at %g", k, s.ZeroMM, -f.SlopePS2PerMM, f.ZeroMM)
	}
}

func TestFitStretcherWithTLMatchesSciPy(t *testing.T) {
	var g stretcherGolden
	readJSON(t, "testdata/stretcher_scipy.json", &g)
	f, err := FitStretcherWithTL(g.StageMM, g.FWHMPS, g.KnownTL.TLFWHMPS)
	if err != nil {
		t.Fatal(err)
	}
	relClose(t, "slope", f.SlopePS2PerMM, g.KnownTL.Fit["slope_ps2_per_mm"], 1e-6)
	relClose(t, "zero_mm", f.ZeroMM, g.KnownTL.Fit["zero_mm"], 1e-6)
	relClose(t, "sigma slope", f.SigmaSlopePS2PerMM, g.KnownTL.Sigma["slope_ps2_per_mm"], 1e-4)
	relClose(t, "sigma zero", f.SigmaZeroMM, g.KnownTL.Sigma["zero_mm"], 1e-4)
	if f.TLFWHMPS != g.KnownTL.TLFWHMPS || f.SigmaTLFWHMPS != 0 || f.DoF != len(g.StageMM)-2 {
		t.Errorf("fixed TL: %+v", f)
	}
	if _, err := FitStretcherWithTL(g.StageMM, g.FWHMPS, 0); err == nil {
		t.Error("TL 0: want an error")
	}
}

func TestFitStretcherNoiseless(t *testing.T) {
	// Readings drawn on one side of the zero only still fix all three
	// parameters when the TL region is approached.
	var x, y []float64
	for mm := 560.0; mm <= 800; mm += 10 {
		x = append(x, mm)
		y = append(y, ChirpedFWHMPS(2.4, -0.05*(mm-575)))
	}
	f, err := FitStretcher(x, y)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(f.SlopePS2PerMM-0.05) > 1e-9 || math.Abs(f.ZeroMM-575) > 1e-6 || math.Abs(f.TLFWHMPS-2.4) > 1e-9 {
		t.Errorf("fit %+v, want 0.05 ps²/mm, 575 mm, 2.4 ps", f)
	}
}
