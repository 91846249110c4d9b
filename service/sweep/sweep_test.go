package sweep

import (
	"math"
	"slices"
	"testing"
	"time"

	"google.golang.org/protobuf/encoding/protojson"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/drivers"
	simbench "github.com/gliss-lab/gliss/sim/bench"
)

func simBench(t testing.TB) *drivers.Bench {
	t.Helper()
	b, err := simbench.New(simbench.Options{Instant: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { b.Close() })
	return b
}

func rng(kind glissv1.AxisKind, from, to float64, n uint32) *glissv1.Axis {
	return &glissv1.Axis{Kind: kind, Values: &glissv1.Axis_Range{Range: &glissv1.Range{From: from, To: to, Count: n}}}
}

func TestSnakeOrder(t *testing.T) {
	b := simBench(t)
	spec := &glissv1.ScanSpec{GateMs: 10, Snake: true, Axes: []*glissv1.Axis{
		rng(glissv1.AxisKind_AXIS_KIND_GDD_PS2, -10, 10, 2),
		rng(glissv1.AxisKind_AXIS_KIND_DETUNING_MEV, -0.1, 0.1, 2),
		rng(glissv1.AxisKind_AXIS_KIND_POWER_UW, 1, 9, 3),
	}}
	p, err := New(spec, b)
	if err != nil {
		t.Fatal(err)
	}
	if p.Points != 12 {
		t.Fatalf("points %d, want 12", p.Points)
	}
	// Row-major, the fastest (last) axis reversed on odd rows.
	want := [][3]uint32{{0, 0, 0}, {0, 0, 1}, {0, 0, 2}, {0, 1, 2}, {0, 1, 1}, {0, 1, 0}, {1, 0, 0}, {1, 0, 1}, {1, 0, 2}, {1, 1, 2}, {1, 1, 1}, {1, 1, 0}}
	for seq := range p.Points {
		idx := p.Index(seq, nil)
		if [3]uint32{idx[0], idx[1], idx[2]} != want[seq] {
			t.Errorf("seq %d: index %v, want %v", seq, idx, want[seq])
		}
	}
}

func TestAmplitudeSpacing(t *testing.T) {
	b := simBench(t)
	a := rng(glissv1.AxisKind_AXIS_KIND_POWER_UW, 1, 16, 4)
	a.Spacing = glissv1.PowerSpacing_POWER_SPACING_AMPLITUDE
	p, err := New(&glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{a}}, b)
	if err != nil {
		t.Fatal(err)
	}
	// Linear in √P from 1 to 4: P = 1, 4, 9, 16 µW (areas π … 4π for Θ = π√(P/1 µW)).
	for i, want := range []float64{1, 4, 9, 16} {
		if got := p.Axes[0].Values[i]; math.Abs(got-want) > 1e-12 {
			t.Errorf("value %d: %v, want %v", i, got, want)
		}
	}
}

func TestTargetsThroughCalibration(t *testing.T) {
	b := simBench(t)
	p, err := New(&glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{rng(glissv1.AxisKind_AXIS_KIND_GDD_PS2, 0, 26.598, 2)}}, b)
	if err != nil {
		t.Fatal(err)
	}
	// Demo stretcher (PHYSICS.md, demo): zero dispersion at 600 mm, 0.04433 ps²/mm,
	// so 26.598 ps² sits at 600 + 26.598/0.0443311 ≈ 1200 mm.
	_, _, t0 := p.At(0)
	_, _, t1 := p.At(1)
	if math.Abs(*t0.StageMM-600) > 1e-9 || math.Abs(*t1.StageMM-1200) > 0.1 {
		t.Errorf("stage targets %v, %v mm", *t0.StageMM, *t1.StageMM)
	}
}

func TestMoveTime(t *testing.T) {
	// Trapezoidal profile: 600 mm at 25 mm/s and 50 mm/s²: 600/25 + 25/50 = 24.5 s.
	if got := MoveTime(600, 25, 50); got != 24500*time.Millisecond {
		t.Errorf("600 mm: %v, want 24.5 s", got)
	}
	// Triangular below v²/a = 12.5 mm: 2·sqrt(d/a); 2 mm → 2·sqrt(0.04) = 0.4 s.
	if got := MoveTime(2, 25, 50); got != 400*time.Millisecond {
		t.Errorf("2 mm: %v, want 0.4 s", got)
	}
}

func TestPreview(t *testing.T) {
	b := simBench(t)
	spec := &glissv1.ScanSpec{GateMs: 100, SettleMs: 50, Snake: true, Axes: []*glissv1.Axis{
		rng(glissv1.AxisKind_AXIS_KIND_STAGE_MM, 100, 200, 3),
		rng(glissv1.AxisKind_AXIS_KIND_ANGLE_DEG, 10, 30, 3),
	}}
	p, err := New(spec, b)
	if err != nil {
		t.Fatal(err)
	}
	start := 100.0
	ang := 10.0
	pv := p.Preview(Target{StageMM: &start, AngleDeg: &ang})
	if pv.Points != 9 || pv.StageTravelMm != 100 {
		t.Errorf("preview points %d travel %v, want 9 and 100 mm", pv.Points, pv.StageTravelMm)
	}
	// Snake: the angle goes 10→30, 30→10, 10→30: 2 × 20° per row + 0 between rows = 40+... per row 20°, 3 rows = 60°.
	if pv.RotationDeg != 60 {
		t.Errorf("rotation %v°, want 60°", pv.RotationDeg)
	}
	if pv.EstimatedDurationS < 9*0.15 {
		t.Errorf("estimate %v s shorter than 9 × (gate + settle)", pv.EstimatedDurationS)
	}
}

// The preview of a temperature series counts each setpoint change with the
// sample's first-order approach and its stability hold, and the move to a
// fixed setting from where the stage is. The approach is elementary:
// T(t) = T1 + (T0 − T1)·exp(−t/τ) (the step response of a first-order
// system: Ogata, Modern Control Engineering, 5th ed., §5-2) comes within
// ±tol of T1 after τ·ln(|T0 − T1|/tol), τ the thermometer's time constant
// (the simulated cryostat's 60 s, sim/cryostat.Demo).
func TestPreviewTemperatureAndFixed(t *testing.T) {
	b := simBench(t)
	tau := b.ByRole(drivers.RoleThermometer).Limits.TemperatureTimeConstantS
	if tau != 60 {
		t.Fatalf("simulated thermometer's time constant %v s, want the demo cryostat's 60 s", tau)
	}
	hold, tol := 20.0, 0.05
	spec := &glissv1.ScanSpec{GateMs: 100, TemperatureHoldS: &hold, TemperatureToleranceK: &tol, Axes: []*glissv1.Axis{
		{Kind: glissv1.AxisKind_AXIS_KIND_TEMPERATURE_K, Values: &glissv1.Axis_List{List: &glissv1.ValueList{Values: []float64{1.5, 4, 8, 20}}}},
		rng(glissv1.AxisKind_AXIS_KIND_ANGLE_DEG, 10, 30, 3),
	}, Fixed: []*glissv1.Setpoint{{Kind: glissv1.AxisKind_AXIS_KIND_STAGE_MM, Value: 700}}}
	p, err := New(spec, b)
	if err != nil {
		t.Fatal(err)
	}
	stage, ang := 600.0, 10.0
	// The sample temperature before the scan unknown: the first approach
	// cannot be estimated.
	pv := p.Preview(Target{StageMM: &stage, AngleDeg: &ang})
	if pv.TemperatureChanges != 4 || !pv.TemperatureApproachUnknown {
		t.Errorf("from an unknown temperature: %d changes, approach unknown %v; want 4, true", pv.TemperatureChanges, pv.TemperatureApproachUnknown)
	}
	if pv.StageTravelMm != 100 {
		t.Errorf("stage travel %v mm, want the 100 mm to the fixed 700 mm", pv.StageTravelMm)
	}
	// From 4.2 K: approaches 4.2→1.5, 1.5→4, 4→8, 8→20 K, each τ·ln(|ΔT|/tol),
	// and four holds (the first setpoint waits too).
	k := 4.2
	pv2 := p.Preview(Target{StageMM: &stage, AngleDeg: &ang, TemperatureK: &k})
	var wantWaits float64
	prev := k
	for _, to := range []float64{1.5, 4, 8, 20} {
		wantWaits += tau*math.Log(math.Abs(to-prev)/tol) + hold
		prev = to
	}
	if pv2.TemperatureChanges != 4 || pv2.TemperatureApproachUnknown {
		t.Errorf("from 4.2 K: %d changes, approach unknown %v; want 4, false", pv2.TemperatureChanges, pv2.TemperatureApproachUnknown)
	}
	// The same points at one angle, with and without the temperatures: the
	// difference is the waits alone.
	at := func(temps bool) float64 {
		axes := []*glissv1.Axis{{Kind: glissv1.AxisKind_AXIS_KIND_ANGLE_DEG, Values: &glissv1.Axis_List{List: &glissv1.ValueList{Values: []float64{10, 10, 10, 10}}}}}
		if temps {
			axes = []*glissv1.Axis{spec.Axes[0], {Kind: glissv1.AxisKind_AXIS_KIND_ANGLE_DEG, Values: &glissv1.Axis_List{List: &glissv1.ValueList{Values: []float64{10}}}}}
		}
		q, err := New(&glissv1.ScanSpec{GateMs: 100, TemperatureHoldS: &hold, TemperatureToleranceK: &tol, Axes: axes, Fixed: spec.Fixed}, b)
		if err != nil {
			t.Fatal(err)
		}
		return q.Preview(Target{StageMM: &stage, AngleDeg: &ang, TemperatureK: &k}).EstimatedDurationS
	}
	if got := at(true) - at(false); math.Abs(got-wantWaits) > 1e-6*wantWaits {
		t.Errorf("temperature waits add %.3f s to the estimate, want %.3f s (τ ln(ΔT/tol) + hold per setpoint)", got, wantWaits)
	}
}

// TestBadSpecs: every bad spec names its field.
func TestBadSpecs(t *testing.T) {
	b := simBench(t)
	gdd := func(from, to float64, n uint32) *glissv1.Axis {
		return rng(glissv1.AxisKind_AXIS_KIND_GDD_PS2, from, to, n)
	}
	cases := []struct {
		name  string
		spec  *glissv1.ScanSpec
		field string
	}{
		{"nil", nil, "spec"},
		{"no axes", &glissv1.ScanSpec{GateMs: 1}, "spec.axes"},
		{"four axes", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{gdd(0, 1, 2), gdd(0, 1, 2), gdd(0, 1, 2), gdd(0, 1, 2)}}, "spec.axes"},
		{"zero gate", &glissv1.ScanSpec{Axes: []*glissv1.Axis{gdd(0, 1, 2)}}, "spec.gate_ms"},
		{"negative gate", &glissv1.ScanSpec{GateMs: -5, Axes: []*glissv1.Axis{gdd(0, 1, 2)}}, "spec.gate_ms"},
		{"NaN gate", &glissv1.ScanSpec{GateMs: math.NaN(), Axes: []*glissv1.Axis{gdd(0, 1, 2)}}, "spec.gate_ms"},
		{"negative settle", &glissv1.ScanSpec{GateMs: 1, SettleMs: -1, Axes: []*glissv1.Axis{gdd(0, 1, 2)}}, "spec.settle_ms"},
		{"NaN from", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{gdd(math.NaN(), 1, 2)}}, "spec.axes[0].range.from"},
		{"Inf to", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{gdd(0, math.Inf(1), 2)}}, "spec.axes[0].range.to"},
		{"zero count", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{gdd(0, 1, 0)}}, "spec.axes[0].range.count"},
		{"huge count", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{gdd(0, 1, 200000)}}, "spec.axes[0].range.count"},
		{"GDD beyond the stage", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{gdd(0, 40, 3)}}, "spec.axes[0].range.to"},
		{"stage beyond travel", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{rng(glissv1.AxisKind_AXIS_KIND_STAGE_MM, -5, 10, 3)}}, "spec.axes[0].range.from"},
		{"power above maximum", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{rng(glissv1.AxisKind_AXIS_KIND_POWER_UW, 1, 500, 3)}}, "spec.axes[0].range.to"},
		{"power below floor", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{rng(glissv1.AxisKind_AXIS_KIND_POWER_UW, 0, 5, 3)}}, "spec.axes[0].range.from"},
		{"detuning beyond laser", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{rng(glissv1.AxisKind_AXIS_KIND_DETUNING_MEV, -50, 0, 3)}}, "spec.axes[0].range.from"},
		{"unknown kind", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{rng(glissv1.AxisKind(99), 0, 1, 2)}}, "spec.axes[0].kind"},
		{"no values", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{{Kind: glissv1.AxisKind_AXIS_KIND_GDD_PS2}}}, "spec.axes[0]"},
		{"empty list", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{{Kind: glissv1.AxisKind_AXIS_KIND_GDD_PS2, Values: &glissv1.Axis_List{List: &glissv1.ValueList{}}}}}, "spec.axes[0].list.values"},
		{"NaN in list", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{{Kind: glissv1.AxisKind_AXIS_KIND_GDD_PS2, Values: &glissv1.Axis_List{List: &glissv1.ValueList{Values: []float64{1, math.NaN()}}}}}}, "spec.axes[0].list.values[1]"},
		{"stage twice", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{gdd(0, 1, 2), rng(glissv1.AxisKind_AXIS_KIND_STAGE_MM, 500, 600, 2)}}, "spec.axes[1].kind"},
		{"fixed on a swept instrument", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{gdd(0, 1, 2)}, Fixed: []*glissv1.Setpoint{{Kind: glissv1.AxisKind_AXIS_KIND_STAGE_MM, Value: 600}}}, "spec.fixed[0].kind"},
		{"fixed out of range", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{gdd(0, 1, 2)}, Fixed: []*glissv1.Setpoint{{Kind: glissv1.AxisKind_AXIS_KIND_POWER_UW, Value: 1e6}}}, "spec.fixed[0].value"},
		{"too many points", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{rng(glissv1.AxisKind_AXIS_KIND_STAGE_MM, 0, 1000, 100000), rng(glissv1.AxisKind_AXIS_KIND_ANGLE_DEG, 0, 40, 100000)}}, "spec.axes"},
		{"zero temperature tolerance", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{gdd(0, 1, 2)}, TemperatureToleranceK: ptr(0)}, "spec.temperature_tolerance_k"},
		{"negative hold", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{gdd(0, 1, 2)}, TemperatureHoldS: ptr(-1)}, "spec.temperature_hold_s"},
		{"pulse area without calibration", &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{rng(glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI, 0, 1, 2)}}, "spec.axes[0].range.from"},
	}
	for _, c := range cases {
		_, err := New(c.spec, b)
		inv, ok := err.(*Invalid)
		if !ok {
			t.Errorf("%s: error %v, want *Invalid", c.name, err)
			continue
		}
		found := false
		for _, f := range inv.Fields {
			if f.Field == c.field {
				found = true
			}
			if f.Msg == "" {
				t.Errorf("%s: empty message for %s", c.name, f.Field)
			}
		}
		if !found {
			t.Errorf("%s: fields %v, want %q", c.name, inv.Fields, c.field)
		}
	}
}

// TestCheckKeepsLimits: the per-command interlock refuses targets outside
// the limits even when a sweep was built with other limits (a property over
// random targets).
func TestCheckKeepsLimits(t *testing.T) {
	b := simBench(t)
	p, err := New(&glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{rng(glissv1.AxisKind_AXIS_KIND_STAGE_MM, 0, 1, 2)}}, b)
	if err != nil {
		t.Fatal(err)
	}
	l := p.limits
	for i := range 2000 {
		x := -2000 + 4000*float64(i)/1999
		tg := Target{StageMM: &x}
		err := p.Check(tg)
		inside := x >= l.stage.StageMinMM && x <= l.stage.StageMaxMM
		if inside != (err == nil) {
			t.Fatalf("stage %v mm: inside %v, Check %v", x, inside, err)
		}
	}
}

// FuzzSpec: any protobuf-JSON input either fails to decode, is refused with
// field errors, or gives a sweep whose every point is inside the limits.
func FuzzSpec(f *testing.F) {
	f.Add(`{"axes":[{"kind":"AXIS_KIND_GDD_PS2","range":{"from":-20,"to":20,"count":5}}],"gateMs":10}`)
	f.Add(`{"axes":[{"kind":"AXIS_KIND_POWER_UW","range":{"from":0.05,"to":100,"count":7},"spacing":"POWER_SPACING_AMPLITUDE"},{"kind":"AXIS_KIND_DETUNING_MEV","list":{"values":[-0.1,0,0.1]}}],"gateMs":1,"snake":true}`)
	f.Add(`{"axes":[{"kind":"AXIS_KIND_STAGE_MM","range":{"from":0,"to":1200,"count":3}}],"gateMs":5,"fixed":[{"kind":"AXIS_KIND_POWER_UW","value":10}]}`)
	f.Add(`{"gateMs":"NaN"}`)
	b := simBench(f)
	f.Fuzz(func(t *testing.T, js string) {
		spec := &glissv1.ScanSpec{}
		if err := protojson.Unmarshal([]byte(js), spec); err != nil {
			return
		}
		p, err := New(spec, b)
		if err != nil {
			if inv, ok := err.(*Invalid); !ok || len(inv.Fields) == 0 {
				t.Fatalf("error %v is not a field error", err)
			}
			return
		}
		if p.Points == 0 {
			t.Fatal("valid sweep with no points")
		}
		// Spot-check points, including the last.
		var idxBuf [MaxAxes]uint32
		var valBuf [AtBufFloats]float64
		for _, seq := range []uint64{0, p.Points / 2, p.Points - 1} {
			idx, vals, tg := p.At(seq)
			if len(vals) != len(p.Axes) {
				t.Fatalf("point %d: %d values for %d axes", seq, len(vals), len(p.Axes))
			}
			// The engine's allocation-free form gives the same point.
			idx2, vals2, tg2 := p.AtInto(seq, idxBuf[:], valBuf[:])
			if !slices.Equal(idx, idx2) || !slices.Equal(vals, vals2) || !sameTarget(tg, tg2) {
				t.Fatalf("point %d: AtInto gives %v %v %+v, At %v %v %+v", seq, idx2, vals2, tg2, idx, vals, tg)
			}
			if err := p.Check(tg); err != nil {
				t.Fatalf("point %d of a valid sweep fails the interlock: %v", seq, err)
			}
		}
	})
}

// sameTarget: the same settings (the values the pointers point to).
func sameTarget(a, b Target) bool {
	eq := func(x, y *float64) bool { return (x == nil) == (y == nil) && (x == nil || *x == *y) }
	return eq(a.StageMM, b.StageMM) && eq(a.GDDPS2, b.GDDPS2) && eq(a.AngleDeg, b.AngleDeg) &&
		eq(a.PowerUW, b.PowerUW) && eq(a.DetuningMeV, b.DetuningMeV) && eq(a.TemperatureK, b.TemperatureK)
}
