package analysis

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/gliss-lab/gliss/sim/phonon"
)

// TestPhononBathInFits: with the demo phonons (PHYSICS.md §7) the
// two-photon Rabi rotation at zero chirp is damped, so the plain model's
// curve differs; a pulse-area fit with the same bath on Poisson counts of
// that curve recovers the scale within its error, and the plain-model fit of
// the same counts fits visibly worse (χ²).
func TestPhononBathInFits(t *testing.T) {
	ctx := context.Background()
	dot := testDot()
	bath := phonon.DemoBath()
	plain, err := YieldCurve(ctx, dot, ChannelXX, 0, 6, 0.05)
	if err != nil {
		t.Fatal(err)
	}
	damped, err := YieldCurveBath(ctx, dot, &bath, ChannelXX, 0, 6, 0.05)
	if err != nil {
		t.Fatal(err)
	}
	// Near the first Rabi minimum after the π pulse (≈ 5.5 π) the damped
	// curve stays well above the plain one.
	k := int(math.Round(5.5 / 0.05))
	if !(damped.Yield[k] > plain.Yield[k]+0.05) {
		t.Errorf("yield at 5.5 π: with phonons %g, without %g: want the phonon curve higher (damped)", damped.Yield[k], plain.Yield[k])
	}
	const scale, amp, bg = 0.8, 30000.0, 40.0
	var powers, means []float64
	for i := 1; i <= 40; i++ {
		r := 6.0 / scale * float64(i) / 40 // √P up to 6 π of area
		powers = append(powers, r*r)
	}
	tm, err := TheoryMapBath(ctx, dot, &bath, ChannelXX, []float64{0}, powers, FitParams{AreaPiPerSqrtUW: scale, BindingMeV: dot.BindingMeV, AmplitudeCounts: amp, BackgroundCounts: bg})
	if err != nil {
		t.Fatal(err)
	}
	means = tm[0]
	counts := poissonCounts(rand.New(rand.NewPCG(3, 4)), means)
	fit, err := CalibratePulseAreaBath(ctx, dot, &bath, powers, counts, 8)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(fit.AreaPiPerSqrtUW-scale) > 3*fit.SigmaAreaPiPerSqrtUW || fit.RedChiSq > 2 {
		t.Errorf("scale %g ± %g (true %g), χ²/DoF %g", fit.AreaPiPerSqrtUW, fit.SigmaAreaPiPerSqrtUW, scale, fit.RedChiSq)
	}
	noBath, err := CalibratePulseArea(ctx, dot, powers, counts, 8)
	if err != nil {
		t.Fatal(err)
	}
	if !(noBath.RedChiSq > 5*fit.RedChiSq) {
		t.Errorf("plain-model fit of phonon counts: χ²/DoF %g, with the bath %g: want the plain model clearly worse", noBath.RedChiSq, fit.RedChiSq)
	}
	// A nil bath and a bath with α = 0 are the plain model bit for bit.
	a, _ := TheoryMap(ctx, dot, ChannelXX, []float64{0, 10}, powers[:5], FitParams{AreaPiPerSqrtUW: 1, AmplitudeCounts: 1, BindingMeV: 4.1})
	b, _ := TheoryMapBath(ctx, dot, &phonon.Bath{}, ChannelXX, []float64{0, 10}, powers[:5], FitParams{AreaPiPerSqrtUW: 1, AmplitudeCounts: 1, BindingMeV: 4.1})
	for i := range a {
		for j := range a[i] {
			if a[i][j] != b[i][j] {
				t.Fatalf("α = 0 bath differs from the plain model at [%d][%d]: %g vs %g", i, j, b[i][j], a[i][j])
			}
		}
	}
}

// BenchmarkCalibratePulseArea is the pulse-area fit of a 40-point sweep
// (yield curve 0–8 π in 0.01 π steps), without and with the demo phonons.
func BenchmarkCalibratePulseArea(b *testing.B) {
	ctx := context.Background()
	dot := testDot()
	bath := phonon.DemoBath()
	var powers []float64
	for i := 1; i <= 40; i++ {
		r := 6.0 * float64(i) / 40
		powers = append(powers, r*r)
	}
	tm, err := TheoryMapBath(ctx, dot, &bath, ChannelXX, []float64{0}, powers, FitParams{AreaPiPerSqrtUW: 1, BindingMeV: dot.BindingMeV, AmplitudeCounts: 30000, BackgroundCounts: 40})
	if err != nil {
		b.Fatal(err)
	}
	counts := poissonCounts(rand.New(rand.NewPCG(5, 6)), tm[0])
	for _, bc := range []struct {
		name string
		bath *phonon.Bath
	}{{"plain", nil}, {"phonons", &bath}} {
		b.Run(bc.name, func(b *testing.B) {
			for b.Loop() {
				if _, err := CalibratePulseAreaBath(ctx, dot, bc.bath, powers, counts, 8); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(b.Elapsed().Milliseconds())/float64(b.N), "ms/fit")
		})
	}
}
