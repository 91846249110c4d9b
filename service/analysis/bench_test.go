package analysis

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/sim/model"
)

// BenchmarkFitMap is the model fit of a 9 × 11 map of the demo dot
// (tolerance 1e-5), the size of TestFitMapRecoversParameters.
func BenchmarkFitMap(b *testing.B) {
	ctx := context.Background()
	dot := testDot()
	truth := FitParams{AreaPiPerSqrtUW: 0.95, BindingMeV: 4.1, DetuningMeV: 0.08, AmplitudeCounts: 20000, BackgroundCounts: 5}
	gdd := model.Linspace(-24, 24, 9)
	var powers []float64
	for k := 1; k <= 11; k++ {
		r := 4.2 / truth.AreaPiPerSqrtUW * float64(k) / 11
		powers = append(powers, r*r)
	}
	clean, err := TheoryMap(ctx, dot, ChannelXX, gdd, powers, truth)
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(11, 9))
	m := PowerChirpMap{GDDPS2: gdd, PowerUW: powers, Counts: make([][]float64, len(gdd))}
	for i := range clean {
		m.Counts[i] = poissonCounts(rng, clean[i])
	}
	maps := 0
	for b.Loop() {
		fit, err := FitMap(ctx, m, MapFitOptions{Base: dot, Start: FitParams{AreaPiPerSqrtUW: 1.0, BindingMeV: 3.7, DetuningMeV: 0.02}})
		if err != nil {
			b.Fatal(err)
		}
		maps = fit.ModelMaps
	}
	b.ReportMetric(float64(maps), "model-maps/op")
	b.ReportMetric(float64(b.Elapsed().Milliseconds())/float64(b.N)/float64(maps), "ms/model-map")
}

func BenchmarkPlateaus(b *testing.B) {
	m := PowerChirpMap{GDDPS2: model.Linspace(-30, 30, 101), PowerUW: model.Linspace(0.1, 100, 200)}
	for i := range m.GDDPS2 {
		row := make([]float64, len(m.PowerUW))
		for j, p := range m.PowerUW {
			s := math.Sin(math.Sqrt(p) * (1 + float64(i)/50))
			row[j] = 1e4*s*s + 5
		}
		m.Counts = append(m.Counts, row)
	}
	for b.Loop() {
		if _, err := Plateaus(m, PlateauOptions{}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(len(m.GDDPS2)*len(m.PowerUW)), "points")
}

func BenchmarkCompare(b *testing.B) {
	const n = 100
	var a, c []*glissv1.Point
	for i := uint32(0); i < n; i++ {
		for j := uint32(0); j < n; j++ {
			a = append(a, pt(i, j, float64(i), float64(j), uint64(i+j), uint64(i*j), nil))
			c = append(c, pt(i, j, float64(i), float64(j), uint64(i+j+1), uint64(i*j), nil))
		}
	}
	for b.Loop() {
		if _, err := Compare(a, c, []string{"x", "xx"}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(n*n, "points")
}
