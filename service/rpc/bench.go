package rpc

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sort"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/service/engine"
)

// Bench implements gliss.v1.BenchService.
type Bench struct {
	glissv1.UnimplementedBenchServiceServer
	Engine *engine.Engine
	// ReadTimeout bounds each instrument reading of a listing (0: 2 s).
	ReadTimeout time.Duration
}

func roleProto(r drivers.Role) glissv1.Role {
	switch r {
	case drivers.RoleStage:
		return glissv1.Role_ROLE_STAGE
	case drivers.RoleAttenuator:
		return glissv1.Role_ROLE_ATTENUATOR
	case drivers.RolePowerMeter:
		return glissv1.Role_ROLE_POWERMETER
	case drivers.RoleCounter:
		return glissv1.Role_ROLE_COUNTER
	case drivers.RoleLaser:
		return glissv1.Role_ROLE_LASER
	case drivers.RoleThermometer:
		return glissv1.Role_ROLE_THERMOMETER
	}
	return glissv1.Role_ROLE_UNSPECIFIED
}

// describe reads one instrument's identity and state.
func (s *Bench) describe(ctx context.Context, e *drivers.Entry) *glissv1.Instrument {
	b := s.Engine.Bench()
	cal := b.CurrentCalibration()
	to := s.ReadTimeout
	if to <= 0 {
		to = 2 * time.Second
	}
	ctx, cancel := context.WithTimeout(ctx, to)
	defer cancel()
	l := e.Limits
	out := &glissv1.Instrument{Name: e.Name, Role: roleProto(e.Role), Driver: e.Driver, Connected: true, Limits: &glissv1.Limits{}, State: &glissv1.InstrumentState{}}
	fail := func(what string, err error) {
		out.Connected = false
		out.LastError = fmt.Sprintf("%s: %v", what, err)
	}
	if id, ok := e.Inst.(drivers.Identifier); ok {
		if s, err := id.Identify(ctx); err == nil {
			out.Identity = s
		} else {
			fail("identify", err)
		}
	}
	lim, st := out.Limits, out.State
	// By role, not by type: a driver may implement more than one interface.
	switch e.Role {
	case drivers.RoleStage:
		inst, ok := e.Inst.(drivers.Stage)
		if !ok {
			fail("role", errRole)
			break
		}
		lim.StageMinMm, lim.StageMaxMm = l.StageMinMM, l.StageMaxMM
		lim.StageSpeedMmPerS, lim.StageAccelMmPerS2 = l.StageSpeedMMPerS, l.StageAccelMMPerS2
		g1, e1 := cal.Stretcher.GDDPS2(l.StageMinMM)
		g2, e2 := cal.Stretcher.GDDPS2(l.StageMaxMM)
		if e1 == nil && e2 == nil {
			lim.GddMinPs2, lim.GddMaxPs2 = math.Min(g1, g2), math.Max(g1, g2)
		}
		if mm, err := inst.PositionMM(ctx); err == nil {
			st.StageMm = &mm
			if g, err := cal.Stretcher.GDDPS2(mm); err == nil {
				st.GddPs2 = &g
			}
		} else {
			fail("position", err)
		}
	case drivers.RoleAttenuator:
		inst, ok := e.Inst.(drivers.Attenuator)
		if !ok {
			fail("role", errRole)
			break
		}
		lim.AngleMinDeg, lim.AngleMaxDeg, lim.RotationSpeedDegPerS = l.AngleMinDeg, l.AngleMaxDeg, l.RotationSpeedDegPerS
		lo, hi := cal.PowerRangeUW()
		lim.PowerMinUw, lim.PowerMaxUw = lo, math.Min(hi, nonZero(l.PowerMaxUW))
		if d, err := inst.AngleDeg(ctx); err == nil {
			st.AngleDeg = &d
			if p, err := cal.PowerUW(d); err == nil {
				st.PowerUw = &p
			}
		} else {
			fail("angle", err)
		}
	case drivers.RolePowerMeter:
		inst, ok := e.Inst.(drivers.PowerMeter)
		if !ok {
			fail("role", errRole)
			break
		}
		if p, err := inst.PowerUW(ctx); err == nil {
			st.MeasuredPowerUw = &p
		} else {
			fail("power", err)
		}
	case drivers.RoleCounter:
		inst, ok := e.Inst.(drivers.Counter)
		if !ok {
			fail("role", errRole)
			break
		}
		st.Channels = inst.Channels()
		chs := make([]string, 0, len(l.CountRateMaxHz))
		for ch := range l.CountRateMaxHz {
			chs = append(chs, ch)
		}
		sort.Strings(chs)
		for _, ch := range chs {
			lim.CountRateMaxHz = append(lim.CountRateMaxHz, &glissv1.ChannelLimit{Channel: ch, MaxHz: l.CountRateMaxHz[ch]})
		}
	case drivers.RoleLaser:
		inst, ok := e.Inst.(drivers.Laser)
		if !ok {
			fail("role", errRole)
			break
		}
		lim.DetuningMinMev, lim.DetuningMaxMev = l.DetuningMinMeV, l.DetuningMaxMeV
		if d, err := inst.DetuningMeV(ctx); err == nil {
			st.DetuningMev = &d
		} else {
			fail("detuning", err)
		}
	case drivers.RoleThermometer:
		inst, ok := e.Inst.(drivers.Thermometer)
		if !ok {
			fail("role", errRole)
			break
		}
		lim.TemperatureMinK, lim.TemperatureMaxK, lim.TemperatureTimeConstantS = l.TemperatureMinK, l.TemperatureMaxK, l.TemperatureTimeConstantS
		if k, err := inst.TemperatureK(ctx); err == nil {
			st.TemperatureK = &k
		} else {
			fail("temperature", err)
		}
	}
	return out
}

var errRole = errors.New("the driver does not implement the instrument's role")

func nonZero(v float64) float64 {
	if v <= 0 {
		return math.Inf(1)
	}
	return v
}

// ListInstruments lists the bench.
func (s *Bench) ListInstruments(ctx context.Context, _ *glissv1.ListInstrumentsRequest) (*glissv1.ListInstrumentsResponse, error) {
	b := s.Engine.Bench()
	out := &glissv1.ListInstrumentsResponse{Bench: b.Name}
	for _, e := range b.Entries {
		out.Instruments = append(out.Instruments, s.describe(ctx, e))
	}
	return out, nil
}

func (s *Bench) entry(name string) (*drivers.Entry, error) {
	if name == "" {
		return nil, invalidField("name", "missing: give the instrument name (gliss bench lists them)")
	}
	e := s.Engine.Bench().ByName(name)
	if e == nil {
		names := []string{}
		for _, x := range s.Engine.Bench().Entries {
			names = append(names, x.Name)
		}
		return nil, invalidField("name", "no instrument %q on the bench (instruments: %v)", name, names)
	}
	return e, nil
}

// GetInstrument reads one instrument.
func (s *Bench) GetInstrument(ctx context.Context, req *glissv1.GetInstrumentRequest) (*glissv1.Instrument, error) {
	e, err := s.entry(req.GetName())
	if err != nil {
		return nil, err
	}
	return s.describe(ctx, e), nil
}

// SetInstrument moves or sets one instrument by hand, within its limits,
// while no scan holds the bench.
func (s *Bench) SetInstrument(ctx context.Context, req *glissv1.SetInstrumentRequest) (*glissv1.Instrument, error) {
	e, err := s.entry(req.GetName())
	if err != nil {
		return nil, err
	}
	b := s.Engine.Bench()
	cal := b.CurrentCalibration()
	l := e.Limits
	finite := func(field string, v float64) error {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return invalidField(field, "%v is not a finite number", v)
		}
		return nil
	}
	var do func(ctx context.Context) error
	wrongRole := func(field string) error {
		return invalidField(field, "instrument %q is a %s: %s does not apply", e.Name, e.Role, field)
	}
	switch t := req.GetTarget().(type) {
	case *glissv1.SetInstrumentRequest_StageMm, *glissv1.SetInstrumentRequest_GddPs2:
		st, ok := e.Inst.(drivers.Stage)
		field := "stage_mm"
		var mm float64
		if g, isG := t.(*glissv1.SetInstrumentRequest_GddPs2); isG {
			field = "gdd_ps2"
			if err := finite(field, g.GddPs2); err != nil {
				return nil, err
			}
			mm, err = cal.Stretcher.PositionMM(g.GddPs2)
			if err != nil {
				return nil, invalidField(field, "stretcher calibration: %v", err)
			}
		} else {
			mm = t.(*glissv1.SetInstrumentRequest_StageMm).StageMm
		}
		if !ok {
			return nil, wrongRole(field)
		}
		if err := finite(field, mm); err != nil {
			return nil, err
		}
		if mm < l.StageMinMM || mm > l.StageMaxMM {
			return nil, invalidField(field, "needs the stage at %.3f mm, outside its travel %g–%g mm", mm, l.StageMinMM, l.StageMaxMM)
		}
		do = func(ctx context.Context) error { return st.MoveToMM(ctx, mm) }
	case *glissv1.SetInstrumentRequest_AngleDeg, *glissv1.SetInstrumentRequest_PowerUw:
		at, ok := e.Inst.(drivers.Attenuator)
		field := "angle_deg"
		var deg float64
		if p, isP := t.(*glissv1.SetInstrumentRequest_PowerUw); isP {
			field = "power_uw"
			if err := finite(field, p.PowerUw); err != nil {
				return nil, err
			}
			if l.PowerMaxUW > 0 && p.PowerUw > l.PowerMaxUW {
				return nil, invalidField(field, "%g µW above the bench's maximum power %g µW", p.PowerUw, l.PowerMaxUW)
			}
			deg, err = cal.AngleWithinDeg(p.PowerUw, l.AngleMinDeg, l.AngleMaxDeg)
			if err != nil {
				return nil, invalidField(field, "%v", err)
			}
		} else {
			deg = t.(*glissv1.SetInstrumentRequest_AngleDeg).AngleDeg
		}
		if !ok {
			return nil, wrongRole(field)
		}
		if err := finite(field, deg); err != nil {
			return nil, err
		}
		if deg < l.AngleMinDeg || deg > l.AngleMaxDeg {
			return nil, invalidField(field, "angle %.3f° outside the attenuator's range %g–%g°", deg, l.AngleMinDeg, l.AngleMaxDeg)
		}
		if pw, err := cal.PowerUW(deg); err == nil && l.PowerMaxUW > 0 && pw > l.PowerMaxUW*(1+1e-9) {
			return nil, invalidField(field, "angle %.3f° gives %.4g µW, above the bench's maximum power %g µW", deg, pw, l.PowerMaxUW)
		}
		do = func(ctx context.Context) error { return at.SetAngleDeg(ctx, deg) }
	case *glissv1.SetInstrumentRequest_DetuningMev:
		la, ok := e.Inst.(drivers.Laser)
		if !ok {
			return nil, wrongRole("detuning_mev")
		}
		v := t.DetuningMev
		if err := finite("detuning_mev", v); err != nil {
			return nil, err
		}
		if v < l.DetuningMinMeV || v > l.DetuningMaxMeV {
			return nil, invalidField("detuning_mev", "%g meV outside the laser's range %g to %g meV", v, l.DetuningMinMeV, l.DetuningMaxMeV)
		}
		do = func(ctx context.Context) error { return la.SetDetuningMeV(ctx, v) }
	case *glissv1.SetInstrumentRequest_TemperatureSetpointK:
		th, ok := e.Inst.(drivers.Thermometer)
		if !ok {
			return nil, wrongRole("temperature_setpoint_k")
		}
		v := t.TemperatureSetpointK
		if err := finite("temperature_setpoint_k", v); err != nil {
			return nil, err
		}
		if v < l.TemperatureMinK || v > l.TemperatureMaxK {
			return nil, invalidField("temperature_setpoint_k", "%g K outside the thermometer's range %g–%g K", v, l.TemperatureMinK, l.TemperatureMaxK)
		}
		do = func(ctx context.Context) error { return th.SetSetpointK(ctx, v) }
	default:
		return nil, invalidField("target", "missing: give one of stage_mm, gdd_ps2, angle_deg, power_uw, detuning_mev, temperature_setpoint_k")
	}
	if err := s.Engine.Manual(ctx, func(ctx context.Context, _ *drivers.Bench) error { return do(ctx) }); err != nil {
		return nil, toStatus(fmt.Errorf("instrument %q: %w", e.Name, err))
	}
	return s.describe(ctx, e), nil
}
