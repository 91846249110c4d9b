// Package sweep turns a scan spec into a sweep: it validates the spec against
// the bench (limits, calibrations), expands every axis into its values,
// orders the points (slowest axis first, optional snake order of the fastest
// axis) and estimates what the scan will cost. It does no I/O: the same code
// validates a submission and, after a restart, recomputes where to resume.
package sweep

import (
	"fmt"
	"math"
	"strings"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/drivers"
)

// Limits on the size of a scan.
const (
	MaxAxes        = 3
	MaxAxisValues  = 100_000
	MaxPoints      = 10_000_000
	MaxNameLen     = 200
	MaxNotesLen    = 10_000
	MaxGateMS      = 3_600_000 // one hour
	MaxSettleMS    = 600_000   // ten minutes
	MaxFixed       = 8
	pointOverheadS = 0.002 // bookkeeping per point in estimates (common practice, no published source)
)

// FieldError is one invalid field of a spec.
type FieldError struct {
	// Field is the path of the field in the request, e.g. "spec.axes[0].range.count".
	Field string
	// Msg says what is wrong and what is allowed.
	Msg string
}

func (e FieldError) Error() string { return e.Field + ": " + e.Msg }

// Invalid is the error returned for an invalid spec: every field that is wrong.
type Invalid struct{ Fields []FieldError }

func (e *Invalid) Error() string {
	parts := make([]string, len(e.Fields))
	for i, f := range e.Fields {
		parts[i] = f.Error()
	}
	return "invalid scan spec: " + strings.Join(parts, "; ")
}

func (e *Invalid) add(field, format string, a ...any) {
	e.Fields = append(e.Fields, FieldError{Field: field, Msg: fmt.Sprintf(format, a...)})
}

// Target is what the instruments are set to at one point. A nil field is
// not commanded at that point (the instrument keeps its setting).
type Target struct {
	StageMM      *float64
	GDDPS2       *float64
	AngleDeg     *float64
	PowerUW      *float64
	DetuningMeV  *float64
	TemperatureK *float64
}

// Axis is one expanded axis.
type Axis struct {
	Kind   glissv1.AxisKind
	Values []float64 // in the axis unit
}

// Sweep is a validated, expanded scan.
type Sweep struct {
	Axes   []Axis
	Snake  bool
	Gate   time.Duration
	Settle time.Duration
	// Fixed is applied before the first point (and again on resume).
	Fixed Target
	// Points is the planned number of points.
	Points uint64
	// Temperature stability after each new setpoint (temperature axes and
	// setpoints): within ± TempToleranceK for TempHold, at most TempTimeout.
	TempToleranceK float64
	TempHold       time.Duration
	TempTimeout    time.Duration

	cal    drivers.Calibration
	limits benchLimits
	// resolved holds, per axis and value, the instrument settings target
	// would compute (see resolve): computed once in New, so that At costs
	// no calibration arithmetic (the stretcher's asin, the Malus inverse).
	resolved []resolvedAxis
}

// resolvedAxis is one axis's values converted to instrument settings:
// set[j] holds the one or two settings of value j, in the order of the
// axis kind's Target fields (see resolve); has2[j] is false when the second
// one is absent (a stage position whose GDD the stretcher cannot give).
type resolvedAxis struct {
	set  [][2]float64
	has2 []bool
}

// benchLimits gathers the limits of the bench's instruments.
type benchLimits struct {
	hasStage, hasAtt, hasLaser, hasTherm, hasCounter bool
	stage, att, laser, therm                         drivers.Limits
}

func limitsOf(b *drivers.Bench) benchLimits {
	var l benchLimits
	if e := b.ByRole(drivers.RoleStage); e != nil {
		l.hasStage, l.stage = true, e.Limits
	}
	if e := b.ByRole(drivers.RoleAttenuator); e != nil {
		l.hasAtt, l.att = true, e.Limits
	}
	if e := b.ByRole(drivers.RoleLaser); e != nil {
		l.hasLaser, l.laser = true, e.Limits
	}
	if e := b.ByRole(drivers.RoleThermometer); e != nil {
		l.hasTherm, l.therm = true, e.Limits
	}
	l.hasCounter = b.ByRole(drivers.RoleCounter) != nil
	return l
}

// Unit returns the unit of an axis kind, as used in column names.
func Unit(k glissv1.AxisKind) string {
	switch k {
	case glissv1.AxisKind_AXIS_KIND_GDD_PS2:
		return "ps2"
	case glissv1.AxisKind_AXIS_KIND_STAGE_MM:
		return "mm"
	case glissv1.AxisKind_AXIS_KIND_POWER_UW:
		return "uw"
	case glissv1.AxisKind_AXIS_KIND_ANGLE_DEG:
		return "deg"
	case glissv1.AxisKind_AXIS_KIND_DETUNING_MEV:
		return "mev"
	case glissv1.AxisKind_AXIS_KIND_TEMPERATURE_K:
		return "k"
	case glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI:
		return "pi"
	}
	return ""
}

// Column is the CSV column name of an axis kind, e.g. "gdd_ps2".
func Column(k glissv1.AxisKind) string {
	switch k {
	case glissv1.AxisKind_AXIS_KIND_GDD_PS2:
		return "gdd_ps2"
	case glissv1.AxisKind_AXIS_KIND_STAGE_MM:
		return "stage_mm"
	case glissv1.AxisKind_AXIS_KIND_POWER_UW:
		return "power_uw"
	case glissv1.AxisKind_AXIS_KIND_ANGLE_DEG:
		return "angle_deg"
	case glissv1.AxisKind_AXIS_KIND_DETUNING_MEV:
		return "detuning_mev"
	case glissv1.AxisKind_AXIS_KIND_TEMPERATURE_K:
		return "temperature_k"
	case glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI:
		return "area_pi"
	}
	return "axis"
}

// instrumentOf names the instrument group an axis kind drives; two axes (or
// an axis and a fixed setpoint) may not drive the same one.
func instrumentOf(k glissv1.AxisKind) string {
	switch k {
	case glissv1.AxisKind_AXIS_KIND_GDD_PS2, glissv1.AxisKind_AXIS_KIND_STAGE_MM:
		return "stage"
	case glissv1.AxisKind_AXIS_KIND_POWER_UW, glissv1.AxisKind_AXIS_KIND_ANGLE_DEG, glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI:
		return "attenuator"
	case glissv1.AxisKind_AXIS_KIND_DETUNING_MEV:
		return "laser"
	case glissv1.AxisKind_AXIS_KIND_TEMPERATURE_K:
		return "thermometer"
	}
	return ""
}

// New validates spec against the bench and expands it. The error is *Invalid
// when the spec is at fault; it lists every bad field. The sweep takes the
// bench's calibration in use once (drivers.Bench.CurrentCalibration, safe
// against a concurrent SetCalibration) and keeps it: a calibration put
// later changes new sweeps only.
func New(spec *glissv1.ScanSpec, b *drivers.Bench) (*Sweep, error) {
	inv := &Invalid{}
	if spec == nil {
		inv.add("spec", "missing")
		return nil, inv
	}
	p := &Sweep{Snake: spec.GetSnake(), cal: b.CurrentCalibration(), limits: limitsOf(b)}
	if len(spec.GetName()) > MaxNameLen {
		inv.add("spec.name", "%d characters, at most %d allowed", len(spec.GetName()), MaxNameLen)
	}
	if len(spec.GetNotes()) > MaxNotesLen {
		inv.add("spec.notes", "%d characters, at most %d allowed", len(spec.GetNotes()), MaxNotesLen)
	}
	g := spec.GetGateMs()
	switch {
	case math.IsNaN(g) || math.IsInf(g, 0) || g <= 0 || g > MaxGateMS:
		inv.add("spec.gate_ms", "gate %v ms: must be > 0 and ≤ %d ms", g, MaxGateMS)
	default:
		p.Gate = time.Duration(g * float64(time.Millisecond))
		if p.Gate <= 0 {
			inv.add("spec.gate_ms", "gate %v ms is shorter than 1 ns", g)
		}
	}
	s := spec.GetSettleMs()
	if math.IsNaN(s) || math.IsInf(s, 0) || s < 0 || s > MaxSettleMS {
		inv.add("spec.settle_ms", "settle %v ms: must be ≥ 0 and ≤ %d ms", s, MaxSettleMS)
	} else {
		p.Settle = time.Duration(s * float64(time.Millisecond))
	}
	p.TempToleranceK, p.TempHold, p.TempTimeout = 0.05, 30*time.Second, 30*time.Minute
	for _, tf := range []struct {
		field string
		v     *float64
		max   float64
		set   func(float64)
	}{
		{"spec.temperature_tolerance_k", spec.TemperatureToleranceK, 10, func(v float64) { p.TempToleranceK = v }},
		{"spec.temperature_hold_s", spec.TemperatureHoldS, 3600, func(v float64) { p.TempHold = time.Duration(v * float64(time.Second)) }},
		{"spec.temperature_timeout_s", spec.TemperatureTimeoutS, 86400, func(v float64) { p.TempTimeout = time.Duration(v * float64(time.Second)) }},
	} {
		if tf.v == nil {
			continue
		}
		if v := *tf.v; math.IsNaN(v) || v <= 0 || v > tf.max {
			inv.add(tf.field, "%v: must be > 0 and ≤ %g", v, tf.max)
		} else {
			tf.set(v)
		}
	}
	if !p.limits.hasCounter {
		inv.add("spec", "the bench %q has no counter: nothing to acquire", b.Name)
	}

	axes := spec.GetAxes()
	if len(axes) == 0 || len(axes) > MaxAxes {
		inv.add("spec.axes", "%d axes given, 1 to %d allowed", len(axes), MaxAxes)
	}
	used := map[string]string{}
	total := uint64(1)
	for i, a := range axes {
		if i >= MaxAxes {
			break
		}
		field := fmt.Sprintf("spec.axes[%d]", i)
		ax, ok := p.expandAxis(field, a, inv)
		if !ok {
			continue
		}
		inst := instrumentOf(ax.Kind)
		if prev, dup := used[inst]; dup {
			inv.add(field+".kind", "%s drives the %s, already driven by %s", a.GetKind(), inst, prev)
			continue
		}
		used[inst] = field
		p.Axes = append(p.Axes, ax)
		total *= uint64(len(ax.Values))
		if total > MaxPoints {
			inv.add("spec.axes", "more than %d points planned", MaxPoints)
			break
		}
	}
	if len(spec.GetFixed()) > MaxFixed {
		inv.add("spec.fixed", "%d setpoints, at most %d allowed", len(spec.GetFixed()), MaxFixed)
	}
	for i, f := range spec.GetFixed() {
		if i >= MaxFixed {
			break
		}
		field := fmt.Sprintf("spec.fixed[%d]", i)
		inst := instrumentOf(f.GetKind())
		if inst == "" {
			inv.add(field+".kind", "unknown kind %v", f.GetKind())
			continue
		}
		if prev, dup := used[inst]; dup {
			inv.add(field+".kind", "%s drives the %s, already driven by %s", f.GetKind(), inst, prev)
			continue
		}
		used[inst] = field
		if err := p.checkValue(f.GetKind(), f.GetValue()); err != "" {
			inv.add(field+".value", "%s", err)
			continue
		}
		p.Fixed.Merge(p.target(f.GetKind(), f.GetValue()))
	}
	if len(inv.Fields) > 0 {
		return nil, inv
	}
	p.Points = total
	p.resolved = make([]resolvedAxis, len(p.Axes))
	for i, a := range p.Axes {
		ra := resolvedAxis{set: make([][2]float64, len(a.Values)), has2: make([]bool, len(a.Values))}
		for j, v := range a.Values {
			ra.set[j], ra.has2[j] = p.resolve(a.Kind, v)
		}
		p.resolved[i] = ra
	}
	return p, nil
}

func (p *Sweep) expandAxis(field string, a *glissv1.Axis, inv *Invalid) (Axis, bool) {
	ax := Axis{Kind: a.GetKind()}
	if instrumentOf(ax.Kind) == "" {
		inv.add(field+".kind", "unknown axis kind %v (one of GDD_PS2, STAGE_MM, POWER_UW, ANGLE_DEG, DETUNING_MEV, TEMPERATURE_K, PULSE_AREA_PI)", a.GetKind())
		return ax, false
	}
	switch v := a.GetValues().(type) {
	case *glissv1.Axis_Range:
		r := v.Range
		if r == nil {
			inv.add(field+".range", "missing")
			return ax, false
		}
		bad := false
		for _, x := range []struct {
			n string
			v float64
		}{{"from", r.GetFrom()}, {"to", r.GetTo()}} {
			if math.IsNaN(x.v) || math.IsInf(x.v, 0) {
				inv.add(field+".range."+x.n, "%v is not a finite number", x.v)
				bad = true
			}
		}
		n := r.GetCount()
		if n < 1 || n > MaxAxisValues {
			inv.add(field+".range.count", "%d values, 1 to %d allowed", n, MaxAxisValues)
			bad = true
		}
		if bad {
			return ax, false
		}
		ax.Values = spaced(r.GetFrom(), r.GetTo(), int(n), ax.Kind == glissv1.AxisKind_AXIS_KIND_POWER_UW && a.GetSpacing() == glissv1.PowerSpacing_POWER_SPACING_AMPLITUDE)
		if ax.Kind == glissv1.AxisKind_AXIS_KIND_POWER_UW && a.GetSpacing() == glissv1.PowerSpacing_POWER_SPACING_AMPLITUDE && (r.GetFrom() < 0 || r.GetTo() < 0) {
			inv.add(field+".range", "amplitude spacing needs powers ≥ 0 µW, got %v to %v", r.GetFrom(), r.GetTo())
			return ax, false
		}
	case *glissv1.Axis_List:
		vals := v.List.GetValues()
		if len(vals) < 1 || len(vals) > MaxAxisValues {
			inv.add(field+".list.values", "%d values, 1 to %d allowed", len(vals), MaxAxisValues)
			return ax, false
		}
		for j, x := range vals {
			if math.IsNaN(x) || math.IsInf(x, 0) {
				inv.add(fmt.Sprintf("%s.list.values[%d]", field, j), "%v is not a finite number", x)
				return ax, false
			}
		}
		ax.Values = append([]float64(nil), vals...)
	default:
		inv.add(field, "give the values as a range (from, to, count) or a list")
		return ax, false
	}
	for j, x := range ax.Values {
		if msg := p.checkValue(ax.Kind, x); msg != "" {
			inv.add(field+valueField(a, j), "%s", msg)
			return ax, false
		}
	}
	return ax, true
}

func valueField(a *glissv1.Axis, j int) string {
	if r := a.GetRange(); r != nil {
		if j == 0 {
			return ".range.from"
		}
		return ".range.to"
	}
	return fmt.Sprintf(".list.values[%d]", j)
}

// spaced returns n values from a to b; amplitude spacing is linear in √P.
func spaced(a, b float64, n int, amplitude bool) []float64 {
	out := make([]float64, n)
	a0, b0 := a, b
	if amplitude {
		a, b = math.Sqrt(a), math.Sqrt(b)
	}
	for i := range out {
		var x float64
		if n == 1 {
			x = a
		} else {
			x = a + (b-a)*float64(i)/float64(n-1)
		}
		if amplitude {
			x *= x
		}
		out[i] = x
	}
	// Hit the end points exactly (√P² is not always P in floating point).
	out[0] = a0
	if n > 1 {
		out[n-1] = b0
	}
	return out
}

// checkValue converts a value to its raw setting and checks every limit
// on the way; it returns "" or a message naming the allowed range.
func (p *Sweep) checkValue(k glissv1.AxisKind, v float64) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return fmt.Sprintf("%v is not a finite number", v)
	}
	l := p.limits
	switch k {
	case glissv1.AxisKind_AXIS_KIND_GDD_PS2:
		if !l.hasStage {
			return "the bench has no stage"
		}
		mm, err := p.cal.Stretcher.PositionMM(v)
		if err != nil {
			return fmt.Sprintf("GDD %.10g ps²: stretcher calibration: %v", v, err)
		}
		if mm < l.stage.StageMinMM || mm > l.stage.StageMaxMM {
			lo, hi := p.gddRange()
			return fmt.Sprintf("GDD %.10g ps² needs the stage at %.3f mm, outside its travel %.10g–%.10g mm: allowed GDD %.3f to %.3f ps²", v, mm, l.stage.StageMinMM, l.stage.StageMaxMM, lo, hi)
		}
	case glissv1.AxisKind_AXIS_KIND_STAGE_MM:
		if !l.hasStage {
			return "the bench has no stage"
		}
		if v < l.stage.StageMinMM || v > l.stage.StageMaxMM {
			return fmt.Sprintf("stage position %.10g mm outside the travel %.10g–%.10g mm", v, l.stage.StageMinMM, l.stage.StageMaxMM)
		}
	case glissv1.AxisKind_AXIS_KIND_POWER_UW:
		if !l.hasAtt {
			return "the bench has no attenuator"
		}
		return p.checkPower(v)
	case glissv1.AxisKind_AXIS_KIND_ANGLE_DEG:
		if !l.hasAtt {
			return "the bench has no attenuator"
		}
		if msg := p.checkAngle(v); msg != "" {
			return msg
		}
		pw, err := p.cal.PowerUW(v)
		if err != nil {
			return fmt.Sprintf("angle %.10g°: attenuator calibration: %v", v, err)
		}
		if l.att.PowerMaxUW > 0 && pw > l.att.PowerMaxUW {
			return fmt.Sprintf("angle %.10g° gives %.4g µW through the attenuator calibration, above the bench's maximum power %.10g µW", v, pw, l.att.PowerMaxUW)
		}
	case glissv1.AxisKind_AXIS_KIND_DETUNING_MEV:
		if !l.hasLaser {
			return "the bench has no tunable laser"
		}
		if v < l.laser.DetuningMinMeV || v > l.laser.DetuningMaxMeV {
			return fmt.Sprintf("detuning %.10g meV outside the laser's range %.10g to %.10g meV", v, l.laser.DetuningMinMeV, l.laser.DetuningMaxMeV)
		}
	case glissv1.AxisKind_AXIS_KIND_TEMPERATURE_K:
		if !l.hasTherm {
			return "the bench has no thermometer"
		}
		if v < l.therm.TemperatureMinK || v > l.therm.TemperatureMaxK {
			return fmt.Sprintf("temperature %.10g K outside the thermometer's range %.10g–%.10g K", v, l.therm.TemperatureMinK, l.therm.TemperatureMaxK)
		}
	case glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI:
		if !l.hasAtt {
			return "the bench has no attenuator"
		}
		pa := p.cal.PulseArea
		if pa == nil {
			return "pulse-area axes need a pulse-area calibration, which this bench does not have yet (gliss calib pulse-area --from-scan ID)"
		}
		if v < 0 {
			return fmt.Sprintf("pulse area %.10g π: must be ≥ 0", v)
		}
		pw := pa.PowerUW(v)
		if msg := p.checkPower(pw); msg != "" {
			lo, hi := p.areaRange()
			return fmt.Sprintf("pulse area %.10g π needs %.4g µW by the pulse-area calibration (%.4g π/√µW): %s; allowed areas %.4g to %.4g π", v, pw, pa.AreaPiPerSqrtUW, msg, lo, hi)
		}
	default:
		return fmt.Sprintf("unknown kind %v", k)
	}
	return ""
}

// powerRangeUW is the power range allowed by the attenuator calibration and
// the bench's maximum power.
func (p *Sweep) powerRangeUW() (float64, float64) {
	lo, hi := p.cal.PowerRangeUW()
	if m := p.limits.att.PowerMaxUW; m > 0 && m < hi {
		hi = m
	}
	return lo, hi
}

// checkPower checks a power against the attenuator's range, the bench's
// maximum power and the angle limits.
func (p *Sweep) checkPower(v float64) string {
	lo, hi := p.powerRangeUW()
	if v < lo || v > hi {
		return fmt.Sprintf("power %.10g µW outside the allowed %.10g–%.10g µW (attenuator range and the bench's maximum power)", v, lo, hi)
	}
	// angleFor only returns an angle within the attenuator's limits.
	if _, err := p.angleFor(v); err != nil {
		return err.Error()
	}
	return ""
}

// angleFor is the attenuator angle within its limits that gives power uw.
func (p *Sweep) angleFor(uw float64) (float64, error) {
	l := p.limits.att
	return p.cal.AngleWithinDeg(uw, l.AngleMinDeg, l.AngleMaxDeg)
}

// areaRange is the pulse-area range of the allowed powers.
func (p *Sweep) areaRange() (float64, float64) {
	lo, hi := p.powerRangeUW()
	return p.cal.PulseArea.AreaPi(lo), p.cal.PulseArea.AreaPi(hi)
}

func (p *Sweep) checkAngle(deg float64) string {
	l := p.limits.att
	if deg < l.AngleMinDeg || deg > l.AngleMaxDeg {
		return fmt.Sprintf("angle %.4g° outside the attenuator's range %g–%g°", deg, l.AngleMinDeg, l.AngleMaxDeg)
	}
	return ""
}

// gddRange is the GDD reachable over the stage travel.
func (p *Sweep) gddRange() (float64, float64) {
	a, errA := p.cal.Stretcher.GDDPS2(p.limits.stage.StageMinMM)
	b, errB := p.cal.Stretcher.GDDPS2(p.limits.stage.StageMaxMM)
	if errA != nil || errB != nil {
		return math.NaN(), math.NaN()
	}
	return math.Min(a, b), math.Max(a, b)
}

// target converts one value of an axis kind to instrument settings. The
// value has been checked by checkValue.
func (p *Sweep) target(k glissv1.AxisKind, v float64) Target {
	var t Target
	switch k {
	case glissv1.AxisKind_AXIS_KIND_GDD_PS2:
		mm, _ := p.cal.Stretcher.PositionMM(v)
		t.StageMM, t.GDDPS2 = ptr(mm), ptr(v)
	case glissv1.AxisKind_AXIS_KIND_STAGE_MM:
		g, err := p.cal.Stretcher.GDDPS2(v)
		t.StageMM = ptr(v)
		if err == nil {
			t.GDDPS2 = ptr(g)
		}
	case glissv1.AxisKind_AXIS_KIND_POWER_UW:
		deg, _ := p.angleFor(v)
		t.AngleDeg, t.PowerUW = ptr(deg), ptr(v)
	case glissv1.AxisKind_AXIS_KIND_ANGLE_DEG:
		pw, _ := p.cal.PowerUW(v)
		t.AngleDeg, t.PowerUW = ptr(v), ptr(pw)
	case glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI:
		pw := p.cal.PulseArea.PowerUW(v)
		deg, _ := p.angleFor(pw)
		t.AngleDeg, t.PowerUW = ptr(deg), ptr(pw)
	case glissv1.AxisKind_AXIS_KIND_DETUNING_MEV:
		t.DetuningMeV = ptr(v)
	case glissv1.AxisKind_AXIS_KIND_TEMPERATURE_K:
		t.TemperatureK = ptr(v)
	}
	return t
}

func ptr(v float64) *float64 { return &v }

// resolve is target's arithmetic without the allocations: the settings of
// value v in the order of fields (below), and whether the second is set.
func (p *Sweep) resolve(k glissv1.AxisKind, v float64) (set [2]float64, has2 bool) {
	t := p.target(k, v)
	first, second := fields(k, &t)
	if first != nil {
		set[0] = *first
	}
	if second != nil {
		set[1], has2 = *second, true
	}
	return set, has2
}

// fields are the Target fields an axis kind sets: (StageMM, GDDPS2) for
// GDD and stage axes, (AngleDeg, PowerUW) for power, angle and pulse-area
// axes, (DetuningMeV, nil) and (TemperatureK, nil).
func fields(k glissv1.AxisKind, t *Target) (first, second *float64) {
	switch k {
	case glissv1.AxisKind_AXIS_KIND_GDD_PS2, glissv1.AxisKind_AXIS_KIND_STAGE_MM:
		return t.StageMM, t.GDDPS2
	case glissv1.AxisKind_AXIS_KIND_POWER_UW, glissv1.AxisKind_AXIS_KIND_ANGLE_DEG, glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI:
		return t.AngleDeg, t.PowerUW
	case glissv1.AxisKind_AXIS_KIND_DETUNING_MEV:
		return t.DetuningMeV, nil
	case glissv1.AxisKind_AXIS_KIND_TEMPERATURE_K:
		return t.TemperatureK, nil
	}
	return nil, nil
}

// Merge sets the fields that o sets.
func (t *Target) Merge(o Target) {
	if o.StageMM != nil {
		t.StageMM = o.StageMM
	}
	if o.GDDPS2 != nil {
		t.GDDPS2 = o.GDDPS2
	}
	if o.AngleDeg != nil {
		t.AngleDeg = o.AngleDeg
	}
	if o.PowerUW != nil {
		t.PowerUW = o.PowerUW
	}
	if o.DetuningMeV != nil {
		t.DetuningMeV = o.DetuningMeV
	}
	if o.TemperatureK != nil {
		t.TemperatureK = o.TemperatureK
	}
}

// Index returns the axis indices of point seq (slowest axis first), in
// acquisition order: row-major, with the fastest axis reversed on every
// other row in snake order.
func (p *Sweep) Index(seq uint64, idx []uint32) []uint32 {
	idx = idx[:0]
	n := len(p.Axes)
	for range n {
		idx = append(idx, 0)
	}
	rest := seq
	for i := n - 1; i >= 0; i-- {
		m := uint64(len(p.Axes[i].Values))
		idx[i] = uint32(rest % m)
		rest /= m
	}
	if p.Snake && n > 0 {
		fast := uint64(len(p.Axes[n-1].Values))
		row := seq / fast
		if row%2 == 1 {
			idx[n-1] = uint32(fast-1) - idx[n-1]
		}
	}
	return idx
}

// At returns the axis values and instrument targets of point seq.
//
// Two allocations: idx, and one array that holds values (its first
// len(idx) elements, capacity limited so that an append cannot reach the
// rest) and the settings the Target points to.
func (p *Sweep) At(seq uint64) (idx []uint32, values []float64, t Target) {
	n := len(p.Axes)
	return p.AtInto(seq, make([]uint32, 0, n), make([]float64, 3*n))
}

// AtBufFloats is the length of the buf AtInto needs for a sweep of MaxAxes
// axes (3 per axis: its value and up to two settings).
const AtBufFloats = 3 * MaxAxes

// AtInto is At without allocating: idx is built in idxBuf's array
// (capacity ≥ len(p.Axes)) and values and the settings the Target points
// to live in buf (length ≥ 3·len(p.Axes)). Both must stay unchanged as long
// as the results are used.
func (p *Sweep) AtInto(seq uint64, idxBuf []uint32, buf []float64) (idx []uint32, values []float64, t Target) {
	n := len(p.Axes)
	idx = p.Index(seq, idxBuf[:0:n])
	buf = buf[: 3*n : 3*n]
	values = buf[:n:n]
	for i, j := range idx {
		values[i] = p.Axes[i].Values[j]
		if i >= len(p.resolved) {
			t.Merge(p.target(p.Axes[i].Kind, values[i])) // a Sweep not made by New
			continue
		}
		ra := p.resolved[i]
		s := buf[n+2*i : n+2*i+2 : n+2*i+2]
		s[0], s[1] = ra.set[j][0], ra.set[j][1]
		var o Target
		first := &s[0]
		var second *float64
		if ra.has2[j] {
			second = &s[1]
		}
		switch p.Axes[i].Kind {
		case glissv1.AxisKind_AXIS_KIND_GDD_PS2, glissv1.AxisKind_AXIS_KIND_STAGE_MM:
			o.StageMM, o.GDDPS2 = first, second
		case glissv1.AxisKind_AXIS_KIND_POWER_UW, glissv1.AxisKind_AXIS_KIND_ANGLE_DEG, glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI:
			o.AngleDeg, o.PowerUW = first, second
		case glissv1.AxisKind_AXIS_KIND_DETUNING_MEV:
			o.DetuningMeV = first
		case glissv1.AxisKind_AXIS_KIND_TEMPERATURE_K:
			o.TemperatureK = first
		}
		t.Merge(o)
	}
	return idx, values, t
}

// Check re-checks a target against the limits just before it is commanded:
// the interlock that keeps anything outside the limits from a driver even if
// a calibration changed after the scan was planned.
func (p *Sweep) Check(t Target) error {
	l := p.limits
	if t.StageMM != nil && (*t.StageMM < l.stage.StageMinMM || *t.StageMM > l.stage.StageMaxMM || math.IsNaN(*t.StageMM)) {
		return fmt.Errorf("interlock: stage target %.3f mm outside %g–%g mm: %w", *t.StageMM, l.stage.StageMinMM, l.stage.StageMaxMM, drivers.ErrLimit)
	}
	if t.AngleDeg != nil && (*t.AngleDeg < l.att.AngleMinDeg || *t.AngleDeg > l.att.AngleMaxDeg || math.IsNaN(*t.AngleDeg)) {
		return fmt.Errorf("interlock: attenuator target %.3f° outside %g–%g°: %w", *t.AngleDeg, l.att.AngleMinDeg, l.att.AngleMaxDeg, drivers.ErrLimit)
	}
	if t.AngleDeg != nil && l.att.PowerMaxUW > 0 {
		if pw, err := p.cal.PowerUW(*t.AngleDeg); err != nil || pw > l.att.PowerMaxUW*(1+1e-9) {
			return fmt.Errorf("interlock: attenuator at %.3f° gives %.4g µW, above the maximum %g µW: %w", *t.AngleDeg, pw, l.att.PowerMaxUW, drivers.ErrLimit)
		}
	}
	if t.DetuningMeV != nil && (*t.DetuningMeV < l.laser.DetuningMinMeV || *t.DetuningMeV > l.laser.DetuningMaxMeV || math.IsNaN(*t.DetuningMeV)) {
		return fmt.Errorf("interlock: detuning %.4f meV outside %g to %g meV: %w", *t.DetuningMeV, l.laser.DetuningMinMeV, l.laser.DetuningMaxMeV, drivers.ErrLimit)
	}
	if t.TemperatureK != nil && (*t.TemperatureK < l.therm.TemperatureMinK || *t.TemperatureK > l.therm.TemperatureMaxK || math.IsNaN(*t.TemperatureK)) {
		return fmt.Errorf("interlock: temperature setpoint %.3f K outside %g–%g K: %w", *t.TemperatureK, l.therm.TemperatureMinK, l.therm.TemperatureMaxK, drivers.ErrLimit)
	}
	return nil
}

// MoveTime is the time a trapezoidal (or, for short moves, triangular)
// velocity profile needs to cover dist at speed v and acceleration a.
func MoveTime(dist, v, a float64) time.Duration {
	dist = math.Abs(dist)
	if dist == 0 || v <= 0 {
		return 0
	}
	var s float64
	if a <= 0 {
		s = dist / v
	} else if dAcc := v * v / a; dist >= dAcc {
		s = dist/v + v/a
	} else {
		s = 2 * math.Sqrt(dist/a)
	}
	return time.Duration(s * float64(time.Second))
}

// Preview estimates the cost of the sweep, starting from the instruments'
// current settings (start; nil fields: unknown, counted from the first
// setting). The fixed settings are commanded first, then the points; each
// temperature setpoint change waits for the sample's stability: the
// approach to the setpoint (approach, when the thermometer's time constant
// and the previous setpoint are known) and then TempHold.
func (p *Sweep) Preview(start Target) *glissv1.Preview {
	pv := &glissv1.Preview{Points: p.Points}
	for _, a := range p.Axes {
		pv.AxisCounts = append(pv.AxisCounts, uint32(len(a.Values)))
	}
	st := previewState{cur: start}
	total := p.advance(&st, p.Fixed, pv)
	for seq := uint64(0); seq < p.Points; seq++ {
		_, _, t := p.At(seq)
		total += p.advance(&st, t, pv) + p.Settle + p.Gate
		if seq > 200_000 {
			// Long scans: extrapolate rather than walk every point.
			f := float64(p.Points) / float64(seq+1)
			total = time.Duration(float64(total) * f)
			pv.StageTravelMm *= f
			pv.RotationDeg *= f
			pv.TemperatureChanges = uint32(math.Round(float64(pv.TemperatureChanges) * f))
			break
		}
	}
	pv.EstimatedDurationS = total.Seconds() + float64(p.Points)*pointOverheadS
	return pv
}

// approach is how long the sample takes to come within the stability
// tolerance of a new setpoint to from temperature from (nil: not known),
// for a first-order approach with the thermometer's time constant τ:
// τ·ln(|Δ| / tolerance), 0 for a step within the tolerance, at most the
// stability timeout. known is false when τ or the start is not known.
func (p *Sweep) approach(from *float64, to float64) (d time.Duration, known bool) {
	tau := p.limits.therm.TemperatureTimeConstantS
	if from == nil || !(tau > 0) || !(p.TempToleranceK > 0) {
		return 0, false
	}
	step := math.Abs(to - *from)
	if step <= p.TempToleranceK {
		return 0, true
	}
	if s := tau * math.Log(step/p.TempToleranceK); s < p.TempTimeout.Seconds() {
		return time.Duration(s * float64(time.Second)), true
	}
	return p.TempTimeout, true
}

// previewState is where the estimate's instruments are: cur, and the
// temperature setpoint the run has commanded (nil before its first: the
// runner commands every instrument at its first point, so the first
// setpoint always waits for stability, even one the sample is already at).
type previewState struct {
	cur  Target
	setK *float64
}

// advance moves the estimate's instruments from st to t: it adds t's
// travel to pv and returns how long the settings take, the slowest of the
// instruments (they are set in parallel). A setting with no known start
// (nil in cur) takes no counted travel.
func (p *Sweep) advance(st *previewState, t Target, pv *glissv1.Preview) time.Duration {
	var move time.Duration
	l := p.limits
	cur := &st.cur
	if t.StageMM != nil {
		if cur.StageMM != nil {
			d := *t.StageMM - *cur.StageMM
			pv.StageTravelMm += math.Abs(d)
			move = max(move, MoveTime(d, l.stage.StageSpeedMMPerS, l.stage.StageAccelMMPerS2))
		}
		cur.StageMM = t.StageMM
	}
	if t.AngleDeg != nil {
		if cur.AngleDeg != nil {
			d := *t.AngleDeg - *cur.AngleDeg
			pv.RotationDeg += math.Abs(d)
			move = max(move, MoveTime(d, l.att.RotationSpeedDegPerS, 0))
		}
		cur.AngleDeg = t.AngleDeg
	}
	if t.DetuningMeV != nil {
		if cur.DetuningMeV != nil && l.laser.DetuningSpeedMeVPerS > 0 {
			move = max(move, MoveTime(*t.DetuningMeV-*cur.DetuningMeV, l.laser.DetuningSpeedMeVPerS, 0))
		}
		cur.DetuningMeV = t.DetuningMeV
	}
	if t.TemperatureK != nil {
		if st.setK == nil || *st.setK != *t.TemperatureK {
			pv.TemperatureChanges++
			d, known := p.approach(cur.TemperatureK, *t.TemperatureK)
			if !known {
				pv.TemperatureApproachUnknown = true
			}
			move = max(move, d+p.TempHold)
		}
		st.setK, cur.TemperatureK = t.TemperatureK, t.TemperatureK
	}
	// The GDD and the power ride on the stage and the attenuator.
	if t.GDDPS2 != nil {
		cur.GDDPS2 = t.GDDPS2
	}
	if t.PowerUW != nil {
		cur.PowerUW = t.PowerUW
	}
	return move
}
