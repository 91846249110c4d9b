package model

import (
	"context"
	"os"
	"runtime"
	"strconv"
	"strings"
	"testing"
)

// benchMapAxes is the map of BenchmarkMap101WithDecay and of
// reference/qutip_speed.py: GDD −25…25 ps² (the demo stretcher's ±26.6 ps²)
// × area 0…10π, demo dot with decay.
func benchMapAxes() (gdd, area []float64) {
	return Linspace(-25, 25, 101), Linspace(0, 10, 101)
}

// BenchmarkPoint is one point of the demo dot with decay on the plateau
// (GDD 20 ps², area 8π) — one of the slower points of the map.
func BenchmarkPoint(b *testing.B) {
	p := DemoParams()
	p.GDDPS2, p.AreaPi = 20, 8
	s := NewSolver()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := s.Solve(p); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "points/s")
}

// BenchmarkPointRabi is a zero-chirp point (area 5π) with decay.
func BenchmarkPointRabi(b *testing.B) {
	p := DemoParams()
	p.AreaPi = 5
	s := NewSolver()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := s.Solve(p); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "points/s")
}

// BenchmarkMap101WithDecay is the whole 101 × 101 power × chirp map of the
// demo dot with decay, over all GOMAXPROCS workers.
func BenchmarkMap101WithDecay(b *testing.B) {
	gdd, area := benchMapAxes()
	base := DemoParams()
	b.ReportAllocs()
	c0 := cpuTime(b)
	for b.Loop() {
		if _, err := Map(context.Background(), base, gdd, AxisAreaPi, area, nil); err != nil {
			b.Fatal(err)
		}
	}
	sec := b.Elapsed().Seconds() / float64(b.N)
	b.ReportMetric(sec, "s/map")
	b.ReportMetric((cpuTime(b)-c0).Seconds()/float64(b.N), "cpu-s/map")
	b.ReportMetric(float64(len(gdd)*len(area))/sec, "points/s")
}

// BenchmarkMap101OneCore is the same map on one core (GOMAXPROCS 1): the
// cost of a point of the map, for the comparison with QuTiP.
func BenchmarkMap101OneCore(b *testing.B) {
	gdd, area := benchMapAxes()
	base := DemoParams()
	defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(1))
	b.ReportAllocs()
	c0 := cpuTime(b)
	for b.Loop() {
		if _, err := Map(context.Background(), base, gdd, AxisAreaPi, area, nil); err != nil {
			b.Fatal(err)
		}
	}
	n := float64(len(gdd) * len(area))
	b.ReportMetric(b.Elapsed().Seconds()/float64(b.N)/n, "s/point")
	b.ReportMetric((cpuTime(b)-c0).Seconds()/float64(b.N)/n, "cpu-s/point")
	b.ReportMetric(n*float64(b.N)/b.Elapsed().Seconds(), "points/s")
}

// BenchmarkMap101Serial solves the same map point by point with Solve on
// one goroutine (no shared step sequences).
func BenchmarkMap101Serial(b *testing.B) {
	gdd, area := benchMapAxes()
	base := DemoParams()
	s := NewSolver()
	b.ReportAllocs()
	c0 := cpuTime(b)
	for b.Loop() {
		for _, g := range gdd {
			for _, a := range area {
				p := base
				p.GDDPS2, p.AreaPi = g, a
				if _, err := s.Solve(p); err != nil {
					b.Fatal(err)
				}
			}
		}
	}
	n := float64(len(gdd) * len(area))
	b.ReportMetric(b.Elapsed().Seconds()/float64(b.N)/n, "s/point")
	b.ReportMetric((cpuTime(b)-c0).Seconds()/float64(b.N)/n, "cpu-s/point")
	b.ReportMetric(n*float64(b.N)/b.Elapsed().Seconds(), "points/s")
}

// BenchmarkSpeedPoints times the points given in GLISS_SPEED_POINTS
// ("gdd:area,gdd:area,…", demo dot with decay) one after the other; it is
// the gliss half of reference/qutip_speed.py and skips without the variable.
func BenchmarkSpeedPoints(b *testing.B) {
	spec := os.Getenv("GLISS_SPEED_POINTS")
	if spec == "" {
		b.Skip("GLISS_SPEED_POINTS not set (run reference/qutip_speed.py)")
	}
	var pts []Params
	for _, f := range strings.Split(spec, ",") {
		g, a, ok := strings.Cut(f, ":")
		gdd, err1 := strconv.ParseFloat(g, 64)
		area, err2 := strconv.ParseFloat(a, 64)
		if !ok || err1 != nil || err2 != nil {
			b.Fatalf("GLISS_SPEED_POINTS: bad point %q", f)
		}
		p := DemoParams()
		p.GDDPS2, p.AreaPi = gdd, area
		pts = append(pts, p)
	}
	s := NewSolver()
	b.ReportAllocs()
	c0 := cpuTime(b)
	for b.Loop() {
		for _, p := range pts {
			if _, err := s.Solve(p); err != nil {
				b.Fatal(err)
			}
		}
	}
	n := float64(b.N * len(pts))
	b.ReportMetric(b.Elapsed().Seconds()/n, "s/point")
	b.ReportMetric((cpuTime(b)-c0).Seconds()/n, "cpu-s/point")
}
