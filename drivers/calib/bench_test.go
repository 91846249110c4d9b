package calib

import (
	"math"
	"testing"
)

func BenchmarkFitMalus(b *testing.B) {
	var g attenuatorGolden
	readJSON(b, "testdata/attenuator_scipy.json", &g)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := FitMalus(g.Malus.AngleDeg, g.Malus.PowerUW); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(len(g.Malus.AngleDeg)), "readings")
}

func BenchmarkFitStretcher(b *testing.B) {
	var g stretcherGolden
	readJSON(b, "testdata/stretcher_scipy.json", &g)
	for b.Loop() {
		if _, err := FitStretcher(g.StageMM, g.FWHMPS); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkFitPulseArea(b *testing.B) {
	// An analytic stand-in curve (sin² of the area, the two-level Rabi law)
	// keeps this benchmark free of the dot model: it measures the fit.
	var c YieldCurve
	for a := 0.0; a <= 10; a += 0.01 {
		s := math.Sin(math.Pi * a / 2)
		c.AreaPi = append(c.AreaPi, a)
		c.Yield = append(c.Yield, s*s)
	}
	var p, y []float64
	for k := 1; k <= 40; k++ {
		pw := 0.1 * float64(k)
		s := math.Sin(math.Pi * 1.3 * math.Sqrt(pw) / 2)
		p = append(p, pw)
		y = append(y, 1e4*s*s+5+10*math.Sin(float64(k)))
	}
	for b.Loop() {
		if _, err := FitPulseArea(p, y, c); err != nil {
			b.Fatal(err)
		}
	}
}
