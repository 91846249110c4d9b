package sweep

import (
	"errors"
	"math"
	"strings"
	"testing"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/calib"
)

// TestPulseAreaAxis: a pulse-area axis goes through the pulse-area
// calibration (P = (Θ/s)²) and then the attenuator law to an angle; without
// the calibration it is refused, and the bench's power limit still applies.
func TestPulseAreaAxis(t *testing.T) {
	b := simBench(t)
	spec := &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{rng(glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI, 0.5, 2, 4)}}
	_, err := New(spec, b)
	var inv *Invalid
	if !errors.As(err, &inv) || inv.Fields[0].Field != "spec.axes[0].range.from" || !strings.Contains(inv.Fields[0].Msg, "pulse-area calibration") {
		t.Fatalf("pulse-area axis without calibration: %v", err)
	}

	cal := b.CurrentCalibration()
	cal.PulseArea = &calib.PulseArea{AreaPiPerSqrtUW: 0.5} // Θ/π = 0.5·√(P/µW): 1 π at 4 µW
	cal.Version = 1
	b.SetCalibration(cal)
	p, err := New(spec, b)
	if err != nil {
		t.Fatal(err)
	}
	wantArea := []float64{0.5, 1, 1.5, 2}
	for seq := range p.Points {
		_, v, tg := p.At(seq)
		if v[0] != wantArea[seq] {
			t.Errorf("point %d: area %g π, want %g", seq, v[0], wantArea[seq])
		}
		wantP := math.Pow(wantArea[seq]/0.5, 2)
		if tg.PowerUW == nil || math.Abs(*tg.PowerUW-wantP) > 1e-12*wantP {
			t.Errorf("point %d: power %v µW, want %g", seq, tg.PowerUW, wantP)
		}
		pw, _ := cal.PowerUW(*tg.AngleDeg)
		if math.Abs(pw-wantP) > 1e-9*wantP {
			t.Errorf("point %d: angle %g° gives %g µW, want %g", seq, *tg.AngleDeg, pw, wantP)
		}
	}
	// 8 π needs 256 µW, above the simulated bench's maximum of 200 µW.
	_, err = New(&glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{rng(glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI, 1, 8, 2)}}, b)
	if !errors.As(err, &inv) || inv.Fields[0].Field != "spec.axes[0].range.to" || !strings.Contains(inv.Fields[0].Msg, "allowed areas") {
		t.Fatalf("8 π: %v", err)
	}
}

// TestNDWheelLaw: a power axis through an ND-wheel calibration set with
// SetCalibration; the sweep made before the swap keeps its law.
func TestNDWheelLaw(t *testing.T) {
	b := simBench(t)
	spec := &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{{Kind: glissv1.AxisKind_AXIS_KIND_POWER_UW, Values: &glissv1.Axis_List{List: &glissv1.ValueList{Values: []float64{10}}}}}}
	before, err := New(spec, b)
	if err != nil {
		t.Fatal(err)
	}
	nd := &calib.NDWheel{P0UW: 200, ODPerDeg: 0.01, MinDeg: 0, MaxDeg: 300} // 200 µW at 0°, OD 3 at 300°
	cal := b.CurrentCalibration()
	cal.Law = &calib.Attenuator{ND: nd}
	cal.Version = 2
	b.SetCalibration(cal)
	after, err := New(spec, b)
	if err != nil {
		t.Fatal(err)
	}
	_, _, t0 := before.At(0)
	_, _, t1 := after.At(0)
	wantMalus, _ := drivers.Calibration{Attenuator: b.Calibration.Attenuator}.AngleDeg(10)
	wantND := -math.Log10(10.0/200) / 0.01 // 130.1°
	if math.Abs(*t0.AngleDeg-wantMalus) > 1e-9 || math.Abs(*t1.AngleDeg-wantND) > 1e-9 {
		t.Errorf("angles for 10 µW: before %g° (want %g), after %g° (want %g)", *t0.AngleDeg, wantMalus, *t1.AngleDeg, wantND)
	}
	// Below the wheel's range (0.2 µW at 300°).
	spec.Axes[0].GetList().Values = []float64{0.1}
	if _, err := New(spec, b); err == nil || !strings.Contains(err.Error(), "outside the allowed") {
		t.Errorf("0.1 µW through the ND wheel: %v", err)
	}
}

// TestPowerOnTheOtherBranch: a half-wave plate whose maximum sits near the
// end of its allowed angles gives a power on the other side of the maximum
// (Malus's law is symmetric about θ0; Hecht, Optics, 5th ed., §8.2) instead
// of refusing it.
func TestPowerOnTheOtherBranch(t *testing.T) {
	b := simBench(t)
	l := b.ByRole(drivers.RoleAttenuator).Limits
	cal := b.CurrentCalibration()
	cal.Law = nil
	// the maximum 5° below the upper angle limit: the usual branch (θ0 to
	// θ0 + 45°) is almost all outside the limits
	cal.Attenuator = calib.Malus{PMinUW: 0.05, PMaxUW: 200, Theta0Deg: l.AngleMaxDeg - 5}
	cal.Version = 1
	b.SetCalibration(cal)
	spec := &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{{Kind: glissv1.AxisKind_AXIS_KIND_POWER_UW,
		Values: &glissv1.Axis_List{List: &glissv1.ValueList{Values: []float64{1, 50, 150}}}}}}
	p, err := New(spec, b)
	if err != nil {
		t.Fatalf("powers reachable below the maximum refused: %v", err)
	}
	for seq := range p.Points {
		_, v, tg := p.At(seq)
		deg := *tg.AngleDeg
		if deg < l.AngleMinDeg || deg > l.AngleMaxDeg {
			t.Errorf("%g µW at %.3f°, outside %g–%g°", v[0], deg, l.AngleMinDeg, l.AngleMaxDeg)
		}
		if pw := cal.Attenuator.PowerUW(deg); math.Abs(pw-v[0]) > 1e-9*v[0] {
			t.Errorf("%g µW: angle %.3f° gives %g µW", v[0], deg, pw)
		}
		if err := p.Check(tg); err != nil {
			t.Errorf("%g µW: interlock refuses its own target: %v", v[0], err)
		}
	}
}

// A value of a FROM:TO:N range is named in an error as a person would write
// it, without the binary rounding of the range arithmetic
// (0.05 + 7·(300−0.05)/10 = 210.01500000000001 in float64).
func TestErrorNamesRoundedValue(t *testing.T) {
	b := simBench(t)
	spec := &glissv1.ScanSpec{GateMs: 1, Axes: []*glissv1.Axis{rng(glissv1.AxisKind_AXIS_KIND_POWER_UW, 0.05, 300, 11)}}
	_, err := New(spec, b)
	if err == nil || !strings.Contains(err.Error(), "power 210.015 µW outside") {
		t.Errorf("error %v, want it to name power 210.015 µW", err)
	}
}
