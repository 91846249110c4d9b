package drivers

import (
	"errors"
	"fmt"
	"math"
	"sync"
	"time"

	"github.com/gliss-lab/gliss/drivers/calib"
)

// Limits are the software limits of one instrument, from the bench file.
// Only the fields of the instrument's role are meaningful. They are a
// convenience for the operator, never a safety interlock.
type Limits struct {
	StageMinMM, StageMaxMM float64
	StageSpeedMMPerS       float64
	StageAccelMMPerS2      float64

	AngleMinDeg, AngleMaxDeg float64
	RotationSpeedDegPerS     float64
	// PowerMaxUW is the bench's maximum power on the sample.
	PowerMaxUW float64

	// CountRateMaxHz is the ceiling per counter channel, counts/s.
	CountRateMaxHz map[string]float64

	DetuningMinMeV, DetuningMaxMeV float64
	// DetuningSpeedMeVPerS is the laser's tuning speed, for previews (0: instant).
	DetuningSpeedMeVPerS float64

	TemperatureMinK, TemperatureMaxK float64
	// TemperatureTimeConstantS is the time constant of the sample's
	// first-order approach to a new setpoint, s (instrument time), for
	// previews (0: not known).
	TemperatureTimeConstantS float64
}

// Entry is one configured instrument of a bench.
type Entry struct {
	Name   string
	Role   Role
	Driver string
	Limits Limits
	// Inst implements the interface of Role (Stage, Attenuator, …).
	Inst Instrument
}

// Calibration is one calibration set of a bench.
type Calibration struct {
	// Stretcher maps stage mm ↔ GDD ps².
	Stretcher calib.Stretcher
	// Attenuator maps angle deg ↔ power µW by Malus's law. It is the law in
	// use when Law is nil (bench files and the simulated bench set it).
	Attenuator calib.Malus
	// Law, when set, is the attenuator law in use (Malus or ND wheel) and
	// takes precedence over Attenuator. Read the law through AttenuatorLaw,
	// PowerUW, AngleDeg and PowerRangeUW, which honour both fields.
	Law *calib.Attenuator
	// PulseArea maps power µW ↔ pulse area π; nil until calibrated.
	PulseArea *calib.PulseArea
	// Version of the bench's calibration set: 0 is the nominal set of the
	// bench file or the simulated bench, then 1, 2, … as new ones are put.
	Version int
}

// AttenuatorLaw is the attenuator law in use.
func (c Calibration) AttenuatorLaw() calib.Attenuator {
	if c.Law != nil {
		return *c.Law
	}
	m := c.Attenuator
	return calib.Attenuator{Malus: &m}
}

// PowerUW is the power at attenuator angle deg by the law in use.
func (c Calibration) PowerUW(deg float64) (float64, error) { return c.AttenuatorLaw().PowerUW(deg) }

// AngleDeg is the attenuator angle that gives power uw by the law in use.
func (c Calibration) AngleDeg(uw float64) (float64, error) { return c.AttenuatorLaw().AngleDeg(uw) }

// AngleWithinDeg is an attenuator angle in [minDeg, maxDeg] that gives power
// uw by the law in use (calib.Attenuator.AngleWithinDeg).
func (c Calibration) AngleWithinDeg(uw, minDeg, maxDeg float64) (float64, error) {
	return c.AttenuatorLaw().AngleWithinDeg(uw, minDeg, maxDeg)
}

// PowerRangeUW is the range of powers the law in use can give (for an ND
// wheel: over its graded sector).
func (c Calibration) PowerRangeUW() (lo, hi float64) {
	a := c.AttenuatorLaw()
	switch {
	case a.Malus != nil:
		return a.Malus.PMinUW, a.Malus.PMaxUW
	case a.ND != nil:
		lo, hi = a.ND.PowerUW(a.ND.MinDeg), a.ND.PowerUW(a.ND.MaxDeg)
		return math.Min(lo, hi), math.Max(lo, hi)
	}
	return math.NaN(), math.NaN()
}

// calibrationState holds the calibration set in use, replaced as a whole.
type calibrationState struct {
	mu  sync.RWMutex
	cur *Calibration
}

// Bench is the configured set of instruments, opened.
type Bench struct {
	// Name of the bench ("sim" for the built-in simulated bench).
	Name    string
	Entries []*Entry
	// Calibration is the bench's nominal calibration set (version 0), from
	// the bench file or the simulated bench. It is not changed once the
	// bench is open: the set in use is CurrentCalibration, replaced by
	// SetCalibration when a new version is put.
	Calibration Calibration
	// SimSeed is the seed of a simulated bench (0 for real instruments).
	SimSeed uint64
	// TimeScale > 1 runs a simulated bench faster than real time (glissd
	// --sim-speed); the engine divides its own waits (settle) by it. 0 or 1
	// for real instruments.
	TimeScale float64

	cal calibrationState
}

// CurrentCalibration returns the calibration set in use for new scans and
// commands: the last one given to SetCalibration, else the nominal
// Calibration. Safe for concurrent use with SetCalibration; a scan keeps
// the set it was planned with.
func (b *Bench) CurrentCalibration() Calibration {
	b.cal.mu.RLock()
	defer b.cal.mu.RUnlock()
	if b.cal.cur != nil {
		return *b.cal.cur
	}
	return b.Calibration
}

// SetCalibration replaces the calibration set in use. The caller hands c
// over: its pointer fields must not be changed afterwards.
func (b *Bench) SetCalibration(c Calibration) {
	b.cal.mu.Lock()
	b.cal.cur = &c
	b.cal.mu.Unlock()
}

// Scale converts a real-time wait to the bench's time.
func (b *Bench) Scale(d time.Duration) time.Duration {
	if b.TimeScale > 1 {
		return time.Duration(float64(d) / b.TimeScale)
	}
	return d
}

// ByRole returns the first instrument of a role, or nil.
func (b *Bench) ByRole(r Role) *Entry {
	for _, e := range b.Entries {
		if e.Role == r {
			return e
		}
	}
	return nil
}

// ByName returns the instrument of that name, or nil.
func (b *Bench) ByName(name string) *Entry {
	for _, e := range b.Entries {
		if e.Name == name {
			return e
		}
	}
	return nil
}

// Stage returns the bench's stage, or nil.
func (b *Bench) Stage() Stage { s, _ := roleInst(b, RoleStage).(Stage); return s }

// Attenuator returns the bench's attenuator, or nil.
func (b *Bench) Attenuator() Attenuator {
	a, _ := roleInst(b, RoleAttenuator).(Attenuator)
	return a
}

// PowerMeter returns the bench's power meter, or nil.
func (b *Bench) PowerMeter() PowerMeter {
	p, _ := roleInst(b, RolePowerMeter).(PowerMeter)
	return p
}

// Counter returns the bench's counter, or nil.
func (b *Bench) Counter() Counter { c, _ := roleInst(b, RoleCounter).(Counter); return c }

// Laser returns the bench's laser, or nil.
func (b *Bench) Laser() Laser { l, _ := roleInst(b, RoleLaser).(Laser); return l }

// Thermometer returns the bench's thermometer, or nil.
func (b *Bench) Thermometer() Thermometer {
	t, _ := roleInst(b, RoleThermometer).(Thermometer)
	return t
}

func roleInst(b *Bench, r Role) Instrument {
	if e := b.ByRole(r); e != nil {
		return e.Inst
	}
	return nil
}

// Validate checks that every entry implements its role's interface and that
// names are unique.
func (b *Bench) Validate() error {
	seen := map[string]bool{}
	var errs []error
	for _, e := range b.Entries {
		if seen[e.Name] {
			errs = append(errs, fmt.Errorf("instrument %q: name used twice", e.Name))
		}
		seen[e.Name] = true
		ok := false
		switch e.Role {
		case RoleStage:
			_, ok = e.Inst.(Stage)
		case RoleAttenuator:
			_, ok = e.Inst.(Attenuator)
		case RolePowerMeter:
			_, ok = e.Inst.(PowerMeter)
		case RoleCounter:
			_, ok = e.Inst.(Counter)
		case RoleLaser:
			_, ok = e.Inst.(Laser)
		case RoleThermometer:
			_, ok = e.Inst.(Thermometer)
		default:
			errs = append(errs, fmt.Errorf("instrument %q: unknown role %q", e.Name, e.Role))
			continue
		}
		if !ok {
			errs = append(errs, fmt.Errorf("instrument %q: driver %q does not implement role %q", e.Name, e.Driver, e.Role))
		}
	}
	return errors.Join(errs...)
}

// Close closes every instrument.
func (b *Bench) Close() error {
	var errs []error
	for _, e := range b.Entries {
		if e.Inst != nil {
			if err := e.Inst.Close(); err != nil {
				errs = append(errs, fmt.Errorf("instrument %q: close: %w", e.Name, err))
			}
		}
	}
	return errors.Join(errs...)
}

// Set returns c as a calibration set (schema SetSchema, c.Version; Created
// and Note left for the caller). A part that does not validate (a bench
// without a stage has no stretcher) is left out.
func (c Calibration) Set() calib.Set {
	s := calib.Set{Schema: calib.SetSchema, Version: c.Version}
	if st := c.Stretcher; st.Validate() == nil {
		s.Stretcher = &st
	}
	if law := c.AttenuatorLaw(); law.Validate() == nil {
		s.Attenuator = &law
	}
	if c.PulseArea != nil && c.PulseArea.Validate() == nil {
		pa := *c.PulseArea
		s.PulseArea = &pa
	}
	return s
}

// CalibrationFromSet makes the calibration of set s; a part s lacks is
// taken from base.
func CalibrationFromSet(s calib.Set, base Calibration) Calibration {
	c := base
	c.Version = s.Version
	if s.Stretcher != nil {
		c.Stretcher = *s.Stretcher
	}
	if s.Attenuator != nil {
		law := *s.Attenuator
		c.Law = &law
		if law.Malus != nil {
			c.Attenuator = *law.Malus
		}
	}
	if s.PulseArea != nil {
		pa := *s.PulseArea
		c.PulseArea = &pa
	}
	return c
}
