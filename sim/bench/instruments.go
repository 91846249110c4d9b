package bench

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"sync"
	"sync/atomic"
	"time"

	"github.com/gliss-lab/gliss/drivers"
)

// base is what every simulated instrument has: the shared optical state, its
// own name and random stream, and a closed flag.
type base struct {
	st    *state
	kind  string // role word: "stage", "attenuator", "powermeter", "counter", "laser", "thermometer"
	name  string // bench name of the instrument
	moves bool   // the instrument moves an axis (stuck faults apply)

	rngMu sync.Mutex
	rng   *rand.Rand

	closed  atomic.Bool
	onClose func() // releases the name (and the registry's reference)
}

func newBase(st *state, kind, name string, moves bool) (*base, error) {
	return newBaseOwning(st, kind, name, moves, moves)
}

// newBaseOwning is newBase for an instrument that owns a part of the state
// (sole: one per state) without moving an axis, like the thermometer, which
// controls the one sample's temperature.
func newBaseOwning(st *state, kind, name string, moves, sole bool) (*base, error) {
	if err := st.claim(name, kind, sole); err != nil {
		return nil, err
	}
	b := &base{st: st, kind: kind, name: name, moves: moves, rng: rngFor(st.seed, name)}
	b.onClose = func() { st.release(name, kind) }
	return b, nil
}

func (b *base) simBase() *base { return b }

// errClosed marks a call on a closed simulated instrument.
var errClosed = errors.New("instrument closed")

// begin checks a call may start: the instrument is open and ctx is live.
func (b *base) begin(ctx context.Context, op string) error {
	if b.closed.Load() {
		return fmt.Errorf("%s %q: %s: %w", b.kind, b.name, op, errClosed)
	}
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("%s %q: %s: %w", b.kind, b.name, op, err)
	}
	return nil
}

// normal draws a standard normal deviates from the instrument's stream.
func (b *base) normal() float64 {
	b.rngMu.Lock()
	defer b.rngMu.Unlock()
	return b.rng.NormFloat64()
}

// Close releases the instrument. It is safe to call twice.
func (b *base) Close() error {
	if b.closed.CompareAndSwap(false, true) && b.onClose != nil {
		b.onClose()
	}
	return nil
}

// Identify names the simulated instrument, as an SCPI *IDN? reply would.
func (b *base) Identify(ctx context.Context) (string, error) {
	if err := b.begin(ctx, "identify"); err != nil {
		return "", err
	}
	if _, err := b.fault(ctx, "identify", false); err != nil {
		return "", err
	}
	return "gliss sim " + b.kind + " v1", nil
}

// axisSpec describes one motorised axis of the optical state for moveAxis.
type axisSpec struct {
	field      string // request field name in errors ("position_mm")
	unit       string
	min, max   float64
	repeat     float64 // arrival repeatability σ
	settleS    float64 // extra wait after arrival (laser relock), instrument s
	pick       func(*state) *axis
	formatting string // %-verb for values
}

var (
	stageSpec = axisSpec{field: "position_mm", unit: "mm", min: stageMinMM, max: stageMaxMM,
		repeat: stageRepeatMM, pick: func(s *state) *axis { return &s.stage }, formatting: "%.3f"}
	angleSpec = axisSpec{field: "angle_deg", unit: "deg", min: angleMinDeg, max: angleMaxDeg,
		repeat: angleRepeatDeg, pick: func(s *state) *axis { return &s.angle }, formatting: "%.3f"}
	detuningSpec = axisSpec{field: "detuning_mev", unit: "meV", min: detuningMinMeV, max: detuningMaxMeV,
		repeat: detuningRepeatMeV, settleS: tuneLockS, pick: func(s *state) *axis { return &s.detuning }, formatting: "%.4f"}
)

func (sp axisSpec) f(v float64) string { return fmt.Sprintf(sp.formatting, v) }

// moveAxis moves one axis to target and returns once it has arrived. The
// axis follows its speed profile in instrument time; a cancelled move stops
// where it is (the position interpolated at the moment of cancellation, as a
// controller's stop command does with an abrupt halt). A target outside the
// axis range wraps drivers.ErrLimit and nothing moves. The arrival position
// carries the axis's repeatability noise, drawn from the instrument's stream.
func (b *base) moveAxis(ctx context.Context, sp axisSpec, target float64) error {
	op := "move to " + sp.f(target) + " " + sp.unit
	if err := b.begin(ctx, op); err != nil {
		return err
	}
	if math.IsNaN(target) || math.IsInf(target, 0) || target < sp.min || target > sp.max {
		return fmt.Errorf("%s %q: %s: %s %g outside [%g, %g] %s: %w", b.kind, b.name, op, sp.field, target, sp.min, sp.max, sp.unit, drivers.ErrLimit)
	}
	stuck, err := b.fault(ctx, op, true)
	if err != nil {
		return err
	}
	st := b.st
	st.mu.Lock()
	ax := sp.pick(st)
	if ax.mv != nil {
		inFlight := ax.mv.toPos
		st.mu.Unlock()
		return fmt.Errorf("%s %q: %s: busy, a move to %s %s is in progress", b.kind, b.name, op, sp.f(inFlight), sp.unit)
	}
	if ax.hasCmd && ax.cmd == target && stuck == nil {
		// Already there: the controller sees no following error and does
		// not move (no new repeatability draw, no relock).
		st.mu.Unlock()
		return nil
	}
	noise := 0.0
	if sp.repeat > 0 {
		noise = b.normal() * sp.repeat // lock order: st.mu, then rngMu
	}
	ax.cmd, ax.hasCmd = target, stuck == nil
	from := ax.pos
	to := math.Min(sp.max, math.Max(sp.min, target+noise))
	if stuck != nil {
		to = from + stuck.StallFraction*(to-from)
	}
	durS := ax.prof.durationS(to - from)
	start := st.now()
	if st.instant || durS == 0 {
		ax.pos = to
		st.mu.Unlock()
	} else {
		ax.mv = &motion{fromPos: from, toPos: to, start: start, durS: durS}
		st.mu.Unlock()
		err := st.sleepUntil(ctx, start.Add(st.wall(durS)))
		st.mu.Lock()
		if err != nil {
			ax.pos = ax.at(st.now(), st.speed)
			ax.mv = nil
			ax.hasCmd = false // stopped short of the target
			at := ax.pos
			st.mu.Unlock()
			st.log.Debug("move cancelled", "instrument", b.name, "at", at)
			return fmt.Errorf("%s %q: %s: stopped at %s %s: %w", b.kind, b.name, op, sp.f(at), sp.unit, err)
		}
		ax.pos = to
		ax.mv = nil
		st.mu.Unlock()
	}
	st.log.Debug("moved", "instrument", b.name, "from", from, "to", to, "move_s", durS)
	if stuck != nil {
		return fmt.Errorf("%s %q: %s: stalled at %s %s: %w", b.kind, b.name, op, sp.f(to), sp.unit, ErrStalled)
	}
	if sp.settleS > 0 {
		if err := st.sleepUntil(ctx, st.now().Add(st.wall(sp.settleS))); err != nil {
			return fmt.Errorf("%s %q: %s: settling: %w", b.kind, b.name, op, err)
		}
	}
	return nil
}

// readAxis reads an axis position (interpolated during a move).
func (b *base) readAxis(ctx context.Context, sp axisSpec, op string) (float64, error) {
	if err := b.begin(ctx, op); err != nil {
		return 0, err
	}
	if _, err := b.fault(ctx, op, false); err != nil {
		return 0, err
	}
	st := b.st
	st.mu.Lock()
	defer st.mu.Unlock()
	return sp.pick(st).at(st.now(), st.speed), nil
}

// Stage is the simulated grating stage of the stretcher: 0–1200 mm travel at
// 25 mm/s and 50 mm/s² (demo stretcher of PHYSICS.md), 1 µm repeatability.
// It implements drivers.Stage and drivers.Identifier.
type Stage struct{ *base }

// MoveToMM moves to mm and returns once the stage has arrived.
func (s *Stage) MoveToMM(ctx context.Context, mm float64) error {
	return s.moveAxis(ctx, stageSpec, mm)
}

// PositionMM reads the position; during a move, the interpolated position.
func (s *Stage) PositionMM(ctx context.Context) (float64, error) {
	return s.readAxis(ctx, stageSpec, "read position")
}

// MoveDurationMM is the real (unscaled) time the simulated stage takes to
// move from one position to another, with its trapezoidal speed profile.
func MoveDurationMM(fromMM, toMM float64) time.Duration {
	return durationOf(profile{stageSpeedMMPerS, stageAccelMMPerS2}.durationS(toMM - fromMM))
}

// Attenuator is the simulated half-wave plate on a rotation mount before a
// polariser: 0–360°, 20°/s (invented). The power it delivers follows the
// true Malus law of the bench. It implements drivers.Attenuator.
type Attenuator struct{ *base }

// SetAngleDeg rotates to deg and returns once the mount has arrived.
func (a *Attenuator) SetAngleDeg(ctx context.Context, deg float64) error {
	return a.moveAxis(ctx, angleSpec, deg)
}

// AngleDeg reads the angle; during a rotation, the interpolated angle.
func (a *Attenuator) AngleDeg(ctx context.Context) (float64, error) {
	return a.readAxis(ctx, angleSpec, "read angle")
}

// Laser is the simulated ps laser, tunable over ±2 meV per photon around the
// two-photon resonance at 2 meV/s, relocking in 50 ms (invented). It
// implements drivers.Laser. Its power noise is drawn by the instruments that
// see the light (counter per gate, power meter per reading), each from its
// own stream, so that the numbers do not depend on goroutine interleaving.
type Laser struct{ *base }

// SetDetuningMeV tunes the laser and returns once it has relocked.
func (l *Laser) SetDetuningMeV(ctx context.Context, mev float64) error {
	return l.moveAxis(ctx, detuningSpec, mev)
}

// DetuningMeV reads the detuning; during tuning, the interpolated value.
func (l *Laser) DetuningMeV(ctx context.Context) (float64, error) {
	return l.readAxis(ctx, detuningSpec, "read detuning")
}

// PowerMeter is the simulated power meter on the sample path. One reading
// averages 50 ms (instrument time) and returns the true average power —
// true Malus law at the plate's angle at the start of the reading × laser
// power noise — with relative noise MeterNoiseRel and a 0.5 nW noise floor.
// It implements drivers.PowerMeter.
type PowerMeter struct{ *base }

// PowerUW reads the average power on the sample, µW.
func (p *PowerMeter) PowerUW(ctx context.Context) (float64, error) {
	const op = "read power"
	if err := p.begin(ctx, op); err != nil {
		return 0, err
	}
	if _, err := p.fault(ctx, op, false); err != nil {
		return 0, err
	}
	st := p.st
	start := st.readStart()
	sn := st.snap()
	t := &st.truth
	p.rngMu.Lock()
	zLaser, zMeter, zFloor := p.rng.NormFloat64(), p.rng.NormFloat64(), p.rng.NormFloat64()
	p.rngMu.Unlock()
	trueUW := t.powerUW(sn.angleDeg) * math.Max(0, 1+t.powerNoiseRel*zLaser)
	reading := trueUW*(1+t.meterNoiseRel*zMeter) + meterFloorUW*zFloor
	if err := st.sleepUntil(ctx, start.Add(st.wall(meterReadS))); err != nil {
		return 0, fmt.Errorf("%s %q: %s: %w", p.kind, p.name, op, err)
	}
	return reading, nil
}
