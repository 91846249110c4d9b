package model

import (
	"context"
	"errors"
	"math"
	"runtime"
	"strings"
	"testing"
)

// TestMapDeterministic: a map is the same, bit for bit, on 1 and on 3
// workers, and each point equals a single Solve of its parameters.
func TestMapDeterministic(t *testing.T) {
	gdd := Linspace(-20, 20, 7)
	area := Linspace(0.5, 9, 6)
	base := DemoParams()
	run := func(procs int) []MapPoint {
		old := runtime.GOMAXPROCS(procs)
		defer runtime.GOMAXPROCS(old)
		var calls, last int
		m, err := Map(context.Background(), base, gdd, AxisAreaPi, area, func(done, total int) {
			calls++
			if done < last || total != len(gdd)*len(area) {
				t.Errorf("progress(%d, %d) after %d", done, total, last)
			}
			last = done
		})
		if err != nil {
			t.Fatal(err)
		}
		if calls == 0 || last != len(m) {
			t.Errorf("progress: %d calls, last done %d of %d", calls, last, len(m))
		}
		return m
	}
	m1, m3 := run(1), run(3)
	for i := range m1 {
		if m1[i] != m3[i] {
			t.Fatalf("point %d: 1 worker %+v, 3 workers %+v", i, m1[i], m3[i])
		}
	}
	got := m1[4*len(area)+2]
	if got.GDDPS2 != gdd[4] || got.AreaPi != area[2] {
		t.Errorf("row-major point (4, 2) is at GDD %g, area %g; want %g, %g", got.GDDPS2, got.AreaPi, gdd[4], area[2])
	}
	// a map point (shared step sequence) agrees with a single Solve to the
	// accuracy of the default tolerance
	s := NewSolver()
	for i, mp := range m1 {
		p := base
		p.GDDPS2, p.AreaPi = mp.GDDPS2, mp.AreaPi
		r, err := s.Solve(p)
		if err != nil {
			t.Fatal(err)
		}
		for _, d := range []float64{mp.G - r.G, mp.X - r.X, mp.XX - r.XX, mp.NX - r.NX, mp.NXX - r.NXX} {
			if math.Abs(d) > 1e-6 {
				t.Fatalf("point %d: map %+v, Solve %+v", i, mp.Result, r)
			}
		}
	}
}

func TestMapDetuningAxis(t *testing.T) {
	det := []float64{-0.5, 0, 0.5}
	m, err := Map(context.Background(), DemoParams(), []float64{10}, AxisDetuningMeV, det, nil)
	if err != nil {
		t.Fatal(err)
	}
	for i, mp := range m {
		if mp.DetuningMeV != det[i] || mp.AreaPi != DemoParams().AreaPi {
			t.Errorf("point %d: detuning %g area %g, want %g and the base area", i, mp.DetuningMeV, mp.AreaPi, det[i])
		}
	}
	if m[0].Result == m[1].Result {
		t.Error("detuning axis has no effect")
	}
	p := DemoParams()
	p.GDDPS2, p.DetuningMeV = 10, 0.5
	if r, _ := Solve(p); m[2].Result != r {
		t.Errorf("detuning map point %+v, Solve %+v", m[2].Result, r)
	}
}

func TestMapErrors(t *testing.T) {
	ctx := context.Background()
	if _, err := Map(ctx, DemoParams(), nil, AxisAreaPi, []float64{1}, nil); err == nil {
		t.Error("empty GDD axis accepted")
	}
	if _, err := Map(ctx, DemoParams(), []float64{0}, AxisAreaPi, []float64{-1}, nil); err == nil || !strings.Contains(err.Error(), "AreaPi") {
		t.Errorf("negative area: err = %v, want one naming AreaPi", err)
	}
	cctx, cancel := context.WithCancel(ctx)
	cancel()
	if _, err := Map(cctx, DemoParams(), Linspace(-20, 20, 50), AxisAreaPi, Linspace(0, 10, 50), nil); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled map: err = %v, want context.Canceled", err)
	}
}

func TestValidate(t *testing.T) {
	if err := DemoParams().Validate(); err != nil {
		t.Fatalf("demo params: %v", err)
	}
	nan := math.NaN()
	for _, c := range []struct {
		field string
		mod   func(*Params)
	}{
		{"FWHMPS", func(p *Params) { p.FWHMPS = 0 }},
		{"FWHMPS", func(p *Params) { p.FWHMPS = nan }},
		{"GDDPS2", func(p *Params) { p.GDDPS2 = math.Inf(1) }},
		{"AreaPi", func(p *Params) { p.AreaPi = -0.1 }},
		{"BindingMeV", func(p *Params) { p.BindingMeV = 1e3 }},
		{"DetuningMeV", func(p *Params) { p.DetuningMeV = nan }},
		{"XLifetimePS", func(p *Params) { p.XLifetimePS = -1 }},
		{"XLifetimePS", func(p *Params) { p.XLifetimePS = 0.01 }},
		{"XXLifetimePS", func(p *Params) { p.XXLifetimePS = math.Inf(-1) }},
		{"Tolerance", func(p *Params) { p.Tolerance = 0.5 }},
	} {
		p := DemoParams()
		c.mod(&p)
		err := p.Validate()
		var re *RangeError
		if !errors.As(err, &re) || re.Field != c.field || !strings.Contains(err.Error(), "allowed") {
			t.Errorf("%+v: err = %v, want a RangeError naming %s and the allowed range", p, err, c.field)
		}
		if _, err := Solve(p); err == nil {
			t.Errorf("Solve(%+v) accepted bad input", p)
		}
	}
}

func TestLinspace(t *testing.T) {
	v := Linspace(-1, 1, 5)
	want := []float64{-1, -0.5, 0, 0.5, 1}
	for i := range want {
		if v[i] != want[i] {
			t.Fatalf("Linspace(-1, 1, 5) = %v, want %v", v, want)
		}
	}
	if v := Linspace(3, 9, 1); len(v) != 1 || v[0] != 3 {
		t.Errorf("Linspace(3, 9, 1) = %v, want [3]", v)
	}
}

// TestMapAccuracy: map points (shared step sequences) are within 1e-6 of
// solves at tolerance 1e-12, on rows that include the hardest point found by
// TestDefaultToleranceAccuracy (short pulse, strong chirp, detuned).
func TestMapAccuracy(t *testing.T) {
	base := DemoParams()
	base.FWHMPS, base.DetuningMeV = 1.88, -0.27
	gdd := []float64{-29.5, 0, 20}
	area := Linspace(0, 14, 29)
	m, err := Map(context.Background(), base, gdd, AxisAreaPi, area, nil)
	if err != nil {
		t.Fatal(err)
	}
	s := NewSolver()
	worst := 0.0
	for _, mp := range m {
		p := base
		p.GDDPS2, p.AreaPi, p.Tolerance = mp.GDDPS2, mp.AreaPi, 1e-12
		r, err := s.Solve(p)
		if err != nil {
			t.Fatal(err)
		}
		for _, d := range []float64{mp.G - r.G, mp.X - r.X, mp.XX - r.XX, mp.NX - r.NX, mp.NXX - r.NXX} {
			worst = max(worst, math.Abs(d))
		}
	}
	t.Logf("largest |map − tol 1e-12| = %.2g", worst)
	if worst > 1e-6 {
		t.Errorf("map points off by up to %.2g, want ≤ 1e-6", worst)
	}
}
