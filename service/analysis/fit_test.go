package analysis

import (
	"context"
	"encoding/json"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/gliss-lab/gliss/sim/model"
)

// testDot is the demo dot of PHYSICS.md (invented) with a solver tolerance
// that is plenty against counting noise.
func testDot() model.Params {
	p := model.DemoParams()
	p.Tolerance = 1e-5
	return p
}

// poissonCounts draws detection-like counts with means A·n + B.
func poissonCounts(rng *rand.Rand, means []float64) []float64 {
	out := make([]float64, len(means))
	for i, m := range means {
		out[i] = distuv.Poisson{Lambda: m, Src: rng}.Rand()
	}
	return out
}

func TestCalibratePulseAreaRecoversPiPower(t *testing.T) {
	ctx := context.Background()
	dot := testDot()
	// Truth: Θ/π = 0.93·sqrt(P/µW); 20000 counts per photon per pulse in the
	// gate (80 MHz × 0.5 % × 50 ms, demo chain), background 5 counts.
	const sTrue, amp, bg = 0.93, 20000.0, 5.0
	curve, err := YieldCurve(ctx, dot, ChannelXX, 0, 10, 0.01)
	if err != nil {
		t.Fatal(err)
	}
	thMax, err := curve.FirstMaximumAreaPi()
	if err != nil {
		t.Fatal(err)
	}
	piTrue := (thMax / sTrue) * (thMax / sTrue)
	// A sweep equally spaced in √P up to 2.2 × the π power.
	var powers []float64
	for k := 1; k <= 40; k++ {
		r := math.Sqrt(2.2*piTrue) * float64(k) / 40
		powers = append(powers, r*r)
	}
	areas := make([]float64, len(powers))
	for i, p := range powers {
		areas[i] = sTrue * math.Sqrt(p)
	}
	pts, err := model.Map(ctx, dot, []float64{0}, model.AxisAreaPi, areas, nil)
	if err != nil {
		t.Fatal(err)
	}
	means := make([]float64, len(pts))
	for i := range pts {
		means[i] = amp*pts[i].NXX + bg
	}
	rng := rand.New(rand.NewPCG(6, 2026))
	counts := poissonCounts(rng, means)
	fit, err := CalibratePulseArea(ctx, dot, powers, counts, 0)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("π area %.4f π; π power %.5f ± %.5f µW (true %.5f), scale %.5f ± %.5f (true %g), χ²/dof %.2f",
		fit.PiAreaPi, fit.PiPowerUW, fit.SigmaPiPowerUW, piTrue, fit.AreaPiPerSqrtUW, fit.SigmaAreaPiPerSqrtUW, sTrue, fit.RedChiSq)
	if math.Abs(fit.PiAreaPi-thMax) > 1e-9 {
		t.Errorf("π area %g, want the curve's first maximum %g", fit.PiAreaPi, thMax)
	}
	// The true π power within the fit's error (3σ: a 1σ bound fails a third
	// of honest draws).
	if d := math.Abs(fit.PiPowerUW - piTrue); d > 3*fit.SigmaPiPowerUW {
		t.Errorf("π power %g ± %g µW, true %g: off by %.1fσ", fit.PiPowerUW, fit.SigmaPiPowerUW, piTrue, d/fit.SigmaPiPowerUW)
	}
	// The error is a real constraint: well below 2 % of the π power here.
	if !(fit.SigmaPiPowerUW > 0 && fit.SigmaPiPowerUW < 0.02*piTrue) {
		t.Errorf("σ(π power) = %g µW: want 0 < σ < 2 %% of %g", fit.SigmaPiPowerUW, piTrue)
	}
	if math.Abs(fit.AmplitudeCounts-amp) > 3*fit.SigmaAmplitudeCounts || math.Abs(fit.BackgroundCounts-bg) > 3*fit.SigmaBackgroundCounts+1 {
		t.Errorf("amplitude %g ± %g (true %g), background %g ± %g (true %g)", fit.AmplitudeCounts, fit.SigmaAmplitudeCounts, amp, fit.BackgroundCounts, fit.SigmaBackgroundCounts, bg)
	}
	if fit.RedChiSq > 2 {
		t.Errorf("χ²/dof %g: the model should fit its own Poisson draws", fit.RedChiSq)
	}
	// The calibration converts both ways.
	if a := fit.AreaPi(fit.PiPowerUW); math.Abs(a-thMax) > 1e-9 {
		t.Errorf("AreaPi(π power) = %g, want %g", a, thMax)
	}
	if p := fit.PowerUW(thMax); math.Abs(p-fit.PiPowerUW) > 1e-9 {
		t.Errorf("PowerUW(π area) = %g, want %g", p, fit.PiPowerUW)
	}
}

func TestFitMapRecoversParameters(t *testing.T) {
	ctx := context.Background()
	dot := testDot()
	truth := FitParams{AreaPiPerSqrtUW: 0.95, BindingMeV: 4.1, DetuningMeV: 0.08, AmplitudeCounts: 20000, BackgroundCounts: 5}
	// A coarse 9 × 11 map: GDD −24 … 24 ps², powers equally spaced in √P up
	// to an area of 4.2 π.
	gdd := model.Linspace(-24, 24, 9)
	var powers []float64
	for k := 1; k <= 11; k++ {
		r := 4.2 / truth.AreaPiPerSqrtUW * float64(k) / 11
		powers = append(powers, r*r)
	}
	clean, err := TheoryMap(ctx, dot, ChannelXX, gdd, powers, truth)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(11, 9))
	m := PowerChirpMap{GDDPS2: gdd, PowerUW: powers, Counts: make([][]float64, len(gdd))}
	for i := range clean {
		m.Counts[i] = poissonCounts(rng, clean[i])
	}
	fit, err := FitMap(ctx, m, MapFitOptions{
		Base:    dot,
		Channel: ChannelXX,
		// The start's detuning has the right sign, as the laser wavelength
		// tells (calib.DetuningMeV): see the mirrored fit below.
		Start: FitParams{AreaPiPerSqrtUW: 1.0, BindingMeV: 3.7, DetuningMeV: 0.02},
	})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("fit %+v", fit.Params)
	t.Logf("σ   %+v", fit.Sigma)
	t.Logf("χ²/dof %.3f (dof %d), %d model maps, %d iterations, predicted drop %.2g, %s", fit.RedChiSq, fit.DoF, fit.ModelMaps, fit.Iterations, fit.ChiSqDrop, fit.Status)
	if !(fit.ChiSqDrop < 0.01) {
		t.Errorf("predicted χ² drop %g: not converged", fit.ChiSqDrop)
	}
	got, sig, want := fit.Params.vec(), fit.Sigma.vec(), truth.vec()
	for k, name := range FitParamNames {
		z := (got[k] - want[k]) / sig[k]
		t.Logf("%-20s %12.6g ± %-10.3g true %-8g z = %+.2f", name, got[k], sig[k], want[k], z)
		// Within the stated uncertainty: 3σ (see the pulse-area test).
		if !(math.Abs(z) <= 3) {
			t.Errorf("%s = %g ± %g, true %g: off by %.1fσ", name, got[k], sig[k], want[k], z)
		}
		if !(sig[k] > 0) {
			t.Errorf("%s: σ = %g, want > 0", name, sig[k])
		}
	}
	if fit.RedChiSq > 1.6 || fit.RedChiSq < 0.5 {
		t.Errorf("χ²/dof = %g: want ≈ 1 for Poisson draws of the model itself", fit.RedChiSq)
	}
	// On a chirp axis symmetric about 0 the map is nearly invariant under
	// (GDD, Δ) → (−GDD, −Δ) (FitMap's doc comment): a start of the other sign
	// lands on the mirrored minimum, with |Δ| and χ² the same to within the
	// errors. This is the limit of what the map tells, checked here.
	mir, err := FitMap(ctx, m, MapFitOptions{Base: dot, Channel: ChannelXX,
		Start: FitParams{AreaPiPerSqrtUW: 1.0, BindingMeV: 3.7, DetuningMeV: -0.02}})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("mirrored start: Δ = %g ± %g meV, χ² %.3f (vs %.3f)", mir.Params.DetuningMeV, mir.Sigma.DetuningMeV, mir.ChiSq, fit.ChiSq)
	if math.Abs(mir.Params.DetuningMeV+fit.Params.DetuningMeV) > 3*fit.Sigma.DetuningMeV || math.Abs(mir.ChiSq-fit.ChiSq) > 1 {
		t.Errorf("mirrored fit: Δ %g, χ² %g; want ≈ %g and ≈ %g", mir.Params.DetuningMeV, mir.ChiSq, -fit.Params.DetuningMeV, fit.ChiSq)
	}
	// The result encodes as JSON, missing points as null.
	m2 := fit
	m2.Residuals = Grid{{1, math.NaN()}}
	if b, err := json.Marshal(m2); err != nil || !strings.Contains(string(b), `"residuals":[[1,null]]`) {
		t.Errorf("json: %v", err)
	}
	// The residual map is data − model.
	for i := range m.Counts {
		for j := range m.Counts[i] {
			if d := m.Counts[i][j] - fit.Model[i][j] - fit.Residuals[i][j]; d != 0 {
				t.Fatalf("residual[%d][%d] inconsistent by %g", i, j, d)
			}
		}
	}
	// The fitted map's robustness analysis runs on the data with the fit's
	// amplitude: the zero-chirp π fidelity is a yield near 1.
	rep, err := Plateaus(m, PlateauOptions{AmplitudeCounts: fit.Params.AmplitudeCounts, BackgroundCounts: fit.Params.BackgroundCounts})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("best chirp %g ps² (range %g µW), π fidelity %.3f", rep.BestGDDPS2, rep.Chirps[rep.Best].RangeUW, rep.PiFidelity)
}

func TestFitMapCancelled(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	m := PowerChirpMap{GDDPS2: []float64{0, 10}, PowerUW: []float64{1, 2, 3, 4}, Counts: [][]float64{{1, 2, 3, 4}, {1, 2, 3, 4}}}
	if _, err := FitMap(ctx, m, MapFitOptions{Base: testDot(), Start: FitParams{AreaPiPerSqrtUW: 1, BindingMeV: 4}}); err == nil {
		t.Error("cancelled context: want an error")
	}
}
