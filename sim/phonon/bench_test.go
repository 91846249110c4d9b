package phonon

import (
	"context"
	"math"
	"testing"

	"github.com/gliss-lab/gliss/sim/model"
)

// BenchmarkGoldenCase solves each golden case at the default tolerance and
// reports its largest difference from QuTiP's brmesolve (maxerr) next to the
// time per point. reference/bench_vs_qutip.py runs it beside QuTiP and
// prints the ratios.
func BenchmarkGoldenCase(b *testing.B) {
	g := loadGolden(b)
	for _, c := range g.Cases {
		b.Run(c.Name, func(b *testing.B) {
			p, bath := c.params()
			s := NewSolver()
			var r model.Result
			var err error
			cpu0 := cpuSeconds()
			for b.Loop() {
				r, err = s.Solve(p, &bath)
				if err != nil {
					b.Fatal(err)
				}
			}
			e := max(math.Abs(r.G-c.G), math.Abs(r.X-c.X), math.Abs(r.XX-c.XX), math.Abs(r.NX-c.NX), math.Abs(r.NXX-c.NXX))
			b.ReportMetric(e*1e6, "maxerr_1e-6")
			b.ReportMetric(float64(s.steps), "steps")
			b.ReportMetric((cpuSeconds()-cpu0)*1e3/float64(b.N), "cpu-ms/op")
		})
	}
}

// BenchmarkDemoPoint: one demo-dot point at 4.2 K on the plateau.
func BenchmarkDemoPoint(b *testing.B) {
	p := model.DemoParams()
	p.GDDPS2, p.AreaPi = 20, 10
	bath := DemoBath()
	s := NewSolver()
	cpu0 := cpuSeconds()
	for b.Loop() {
		if _, err := s.Solve(p, &bath); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(s.steps), "steps")
	// how often the Redfield term was computed exactly (out of 12 stages per
	// step) and on how many steps it was interpolated
	b.ReportMetric(float64(s.exactSets)/float64(s.steps), "exact-sets/step")
	b.ReportMetric(float64(s.interpSteps), "interp-steps")
	b.ReportMetric((cpuSeconds()-cpu0)*1e3/float64(b.N), "cpu-ms/op")
	b.ReportAllocs()
}

// BenchmarkMap51x51 is the map: 51 GDD values over the demo
// stretcher's ±26.6 ps² × 51 pulse areas from 0.2π to 14π (0.04–196 µW on
// the demo coupling), demo dot at 4 K, on all GOMAXPROCS workers. Run with
// -benchtime=1x; the figure is s/map.
func BenchmarkMap51x51(b *testing.B) {
	bath := DemoBath()
	bath.TemperatureK = 4
	gdd := model.Linspace(-26.6, 26.6, 51)
	areas := model.Linspace(0.2, 14, 51)
	cpu0 := cpuSeconds()
	for b.Loop() {
		if _, err := Map(context.Background(), model.DemoParams(), &bath, gdd, model.AxisAreaPi, areas, nil); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(b.Elapsed().Seconds()/float64(b.N), "s/map")
	// CPU seconds per map: the figure that does not depend on other load on
	// the machine (wall s/map ≈ cpu-s/map ÷ 2 on an idle 2-core machine).
	b.ReportMetric((cpuSeconds()-cpu0)/float64(b.N), "cpu-s/map")
}
