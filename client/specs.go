package client

import glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"

// Values is an axis's values before its kind is known: a range or a list.
type Values struct {
	r    *glissv1.Range
	list []float64
}

// Range is FROM:TO:N, count values from from to to inclusive.
func Range(from, to float64, count uint32) Values {
	return Values{r: &glissv1.Range{From: from, To: to, Count: count}}
}

// List is an explicit list of values.
func List(v ...float64) Values { return Values{list: append([]float64(nil), v...)} }

// Axis makes an axis of a kind from values.
func Axis(kind glissv1.AxisKind, v Values) *glissv1.Axis {
	a := &glissv1.Axis{Kind: kind}
	if v.r != nil {
		a.Values = &glissv1.Axis_Range{Range: v.r}
	} else {
		a.Values = &glissv1.Axis_List{List: &glissv1.ValueList{Values: v.list}}
	}
	return a
}

// Options are the settings common to every scan.
type Options struct {
	Name     string
	GateMS   float64 // counter gate per point, ms (0: 100 ms)
	SettleMS float64 // wait after motion, ms
	Snake    bool    // alternate the fast axis's direction
	// AmplitudeSpacing spaces power ranges linearly in √P (pulse area).
	AmplitudeSpacing bool
	// Fixed settings of quantities not swept.
	Fixed []*glissv1.Setpoint
	Notes string
}

// Spec makes a scan spec of these options over the given axes.
func (o Options) Spec(axes ...*glissv1.Axis) *glissv1.ScanSpec {
	g := o.GateMS
	if g == 0 {
		g = 100
	}
	for _, a := range axes {
		if a.Kind == glissv1.AxisKind_AXIS_KIND_POWER_UW && o.AmplitudeSpacing {
			a.Spacing = glissv1.PowerSpacing_POWER_SPACING_AMPLITUDE
		}
	}
	return &glissv1.ScanSpec{Name: o.Name, Axes: axes, Snake: o.Snake, GateMs: g, SettleMs: o.SettleMS, Fixed: o.Fixed, Notes: o.Notes}
}

// Fixed makes a fixed setpoint.
func Fixed(kind glissv1.AxisKind, value float64) *glissv1.Setpoint {
	return &glissv1.Setpoint{Kind: kind, Value: value}
}

// MapSpec is a power × chirp map: GDD (ps², slow axis) × power (µW, fast axis).
func MapSpec(gddPS2, powerUW Values, o Options) *glissv1.ScanSpec {
	return o.Spec(Axis(glissv1.AxisKind_AXIS_KIND_GDD_PS2, gddPS2), Axis(glissv1.AxisKind_AXIS_KIND_POWER_UW, powerUW))
}

// PowerSpec is a power sweep (µW) at the fixed settings of o.
func PowerSpec(powerUW Values, o Options) *glissv1.ScanSpec {
	return o.Spec(Axis(glissv1.AxisKind_AXIS_KIND_POWER_UW, powerUW))
}

// ChirpSpec is a GDD sweep (ps²) at the fixed settings of o.
func ChirpSpec(gddPS2 Values, o Options) *glissv1.ScanSpec {
	return o.Spec(Axis(glissv1.AxisKind_AXIS_KIND_GDD_PS2, gddPS2))
}

// DetuningSpec is a detuning sweep (meV) at the fixed settings of o.
func DetuningSpec(detuningMeV Values, o Options) *glissv1.ScanSpec {
	return o.Spec(Axis(glissv1.AxisKind_AXIS_KIND_DETUNING_MEV, detuningMeV))
}

// DetuningChirpSpec is a detuning × chirp map: GDD (slow) × detuning (fast).
func DetuningChirpSpec(gddPS2, detuningMeV Values, o Options) *glissv1.ScanSpec {
	return o.Spec(Axis(glissv1.AxisKind_AXIS_KIND_GDD_PS2, gddPS2), Axis(glissv1.AxisKind_AXIS_KIND_DETUNING_MEV, detuningMeV))
}
