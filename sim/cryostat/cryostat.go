// Package cryostat is a simulated cryostat temperature controller: the
// thermometer role of package drivers (TemperatureK, SetSetpointK, Close) plus
// Identify, the drivers.Stabilizer wait (WaitStableK) and a WaitStable helper
// for setpoint changes. sim/bench puts one on the simulated bench, where
// the counter's phonons follow its sample temperature.
//
// The sample temperature approaches the setpoint to first order,
//
//	T(t) = T_sp + (T(t0) − T_sp)·exp(−(t − t0)/τ)
//
// from the moment t0 of the last setpoint change, optionally with a limit
// cycle of a badly tuned control loop (Options.OscillationK). Readings add
// seeded Gaussian noise (Options.NoiseK); the noise-free value, which the
// simulated dot uses for its phonons, is SampleK. A setpoint outside
// [MinK, MaxK] is an error wrapping drivers.ErrLimit and changes nothing.
// Every call takes instrument time (a controller query, Options.QueryTime),
// and all instrument time is scaled by Options.Speed: at Speed 100 a time
// constant of 60 s passes in 0.6 s of wall time. Calls honour their context.
//
// Demo values (Demo): base 1.5 K, top 300 K, start at 4.2 K (the demo dot of
// PHYSICS.md), τ = 60 s, reading noise σ 0.01 K (the demo cryostat settles
// within ±0.05 K). They are invented, within what a flow cryostat does.
package cryostat

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

// Clock is the time source of a simulated cryostat. The zero Options use the
// wall clock; tests may give a clock whose Sleep advances Now at once.
type Clock interface {
	Now() time.Time
	// Sleep waits d or until ctx is done (returning its error).
	Sleep(ctx context.Context, d time.Duration) error
}

type wallClock struct{}

func (wallClock) Now() time.Time { return time.Now() }

func (wallClock) Sleep(ctx context.Context, d time.Duration) error {
	return drivers.Wait(ctx, d)
}

// Options configure a simulated cryostat. Zero fields take the Demo value.
type Options struct {
	// Name of the instrument in errors and in Identify.
	Name string
	// MinK and MaxK bound the setpoint, K.
	MinK, MaxK float64
	// InitialK is the sample temperature (and setpoint) at start, K.
	InitialK float64
	// TimeConstant τ of the first-order approach, instrument time.
	TimeConstant time.Duration
	// NoiseK is the σ of the reading noise, K (negative: no noise).
	NoiseK float64
	// OscillationK and OscillationPeriod add a limit cycle
	// A·sin(2π·t/P) to the sample temperature (0: none), the sign of a
	// control loop that never settles.
	OscillationK      float64
	OscillationPeriod time.Duration
	// QueryTime is the instrument time of one call (negative: none).
	QueryTime time.Duration
	// Seed of the noise stream: the same seed and the same calls at the same
	// instrument times give the same readings.
	Seed uint64
	// Speed is the time scale: 100 runs the instrument 100× faster than real
	// time. 0 means 1.
	Speed float64
	// Clock is the time source (nil: the wall clock).
	Clock Clock
}

// Demo returns the demo cryostat's options.
func Demo() Options {
	return Options{
		Name: "cryostat", MinK: 1.5, MaxK: 300, InitialK: 4.2,
		TimeConstant: 60 * time.Second, NoiseK: 0.01, QueryTime: 50 * time.Millisecond,
		OscillationPeriod: 30 * time.Second,
	}
}

func (o Options) withDefaults() Options {
	d := Demo()
	if o.Name == "" {
		o.Name = d.Name
	}
	if o.MinK == 0 && o.MaxK == 0 {
		o.MinK, o.MaxK = d.MinK, d.MaxK
	}
	if o.InitialK == 0 {
		o.InitialK = d.InitialK
	}
	if o.TimeConstant == 0 {
		o.TimeConstant = d.TimeConstant
	}
	switch {
	case o.NoiseK == 0:
		o.NoiseK = d.NoiseK
	case o.NoiseK < 0:
		o.NoiseK = 0
	}
	switch {
	case o.QueryTime == 0:
		o.QueryTime = d.QueryTime
	case o.QueryTime < 0:
		o.QueryTime = 0
	}
	if o.OscillationPeriod == 0 {
		o.OscillationPeriod = d.OscillationPeriod
	}
	if o.Speed == 0 {
		o.Speed = 1
	}
	if o.Clock == nil {
		o.Clock = wallClock{}
	}
	return o
}

func (o Options) validate() error {
	bad := func(field string, v any, want string) error {
		return fmt.Errorf("cryostat options: %s = %v, want %s", field, v, want)
	}
	switch {
	case !(o.MinK > 0) || math.IsInf(o.MinK, 0):
		return bad("MinK", o.MinK, "a finite temperature > 0 K")
	case !(o.MaxK > o.MinK) || math.IsInf(o.MaxK, 0):
		return bad("MaxK", o.MaxK, fmt.Sprintf("finite and > MinK (%g K)", o.MinK))
	case !(o.InitialK >= o.MinK && o.InitialK <= o.MaxK):
		return bad("InitialK", o.InitialK, fmt.Sprintf("%g to %g K", o.MinK, o.MaxK))
	case o.TimeConstant <= 0:
		return bad("TimeConstant", o.TimeConstant, "> 0")
	case !(o.NoiseK >= 0) || math.IsInf(o.NoiseK, 0):
		return bad("NoiseK", o.NoiseK, "finite")
	case !(o.OscillationK >= 0) || math.IsInf(o.OscillationK, 0):
		return bad("OscillationK", o.OscillationK, "finite and ≥ 0")
	case o.OscillationPeriod <= 0:
		return bad("OscillationPeriod", o.OscillationPeriod, "> 0")
	case !(o.Speed > 0) || math.IsInf(o.Speed, 0):
		return bad("Speed", o.Speed, "finite and > 0")
	}
	return nil
}

// Cryostat is one simulated temperature controller. It is safe for
// concurrent use.
type Cryostat struct {
	o      Options
	origin time.Time // wall (clock) time of instrument time 0

	mu        sync.Mutex
	setpointK float64
	fromK     float64 // sample temperature at the last setpoint change
	// steadyBits: the sample temperature's float64 bits while it does not
	// depend on time (at the setpoint since the last change, no
	// oscillation), else steadyNone. Written under mu, read without it on
	// every gate of the simulated counter.
	steadyBits atomic.Uint64
	changedS   float64 // instrument time of the last setpoint change, s
	rng        *rand.Rand
	closed     bool
	faults     []error // queued failures, returned by the next calls
}

// New opens a simulated cryostat.
func New(o Options) (*Cryostat, error) {
	o = o.withDefaults()
	if err := o.validate(); err != nil {
		return nil, err
	}
	c := &Cryostat{
		o:         o,
		origin:    o.Clock.Now(),
		setpointK: o.InitialK,
		fromK:     o.InitialK,
		rng:       rand.New(rand.NewPCG(o.Seed, 0x63727973746174)),
	}
	c.updateSteadyLocked()
	return c, nil
}

// steadyNone marks a sample temperature that changes with time (a NaN's
// bits: no temperature has them).
const steadyNone = 0x7ff8_0000_0000_0001

// updateSteadyLocked records whether the sample temperature is now
// independent of time: then it is the setpoint exactly, as
// sampleAtLocked computes it (the approach term is 0 × a factor ≤ 1 on a
// clock that does not run backwards, and there is no oscillation).
func (c *Cryostat) updateSteadyLocked() {
	if c.fromK == c.setpointK && c.o.OscillationK == 0 {
		c.steadyBits.Store(math.Float64bits(c.setpointK))
	} else {
		c.steadyBits.Store(steadyNone)
	}
}

var _ drivers.Thermometer = (*Cryostat)(nil)
var _ drivers.Identifier = (*Cryostat)(nil)

// Options returns the options in force (defaults filled in).
func (c *Cryostat) Options() Options { return c.o }

// nowS is the instrument time, s.
func (c *Cryostat) nowS() float64 {
	return c.o.Clock.Now().Sub(c.origin).Seconds() * c.o.Speed
}

// wall converts instrument time to wall time.
func (c *Cryostat) wall(d time.Duration) time.Duration {
	return time.Duration(float64(d) / c.o.Speed)
}

// sampleAtLocked is the noise-free sample temperature at instrument time s.
func (c *Cryostat) sampleAtLocked(s float64) float64 {
	return c.smoothAtLocked(s) + c.oscillationLocked(s)
}

// smoothAtLocked is the first-order approach alone.
func (c *Cryostat) smoothAtLocked(s float64) float64 {
	if c.fromK == c.setpointK && s >= c.changedS {
		// At the setpoint: the approach term is 0 × a factor in (0, 1], so
		// the exponential (the hot path's cost) is skipped, bit for bit.
		return c.setpointK
	}
	tau := c.o.TimeConstant.Seconds()
	return c.setpointK + (c.fromK-c.setpointK)*math.Exp(-(s-c.changedS)/tau)
}

// begin waits one query time and checks for closing, cancellation and
// injected faults.
func (c *Cryostat) begin(ctx context.Context, what string) error {
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("cryostat %q: %s: %w", c.o.Name, what, err)
	}
	c.mu.Lock()
	closed := c.closed
	var fault error
	if !closed && len(c.faults) > 0 {
		fault = c.faults[0]
		c.faults = c.faults[1:]
	}
	c.mu.Unlock()
	if closed {
		return fmt.Errorf("cryostat %q: %s: closed: %w", c.o.Name, what, drivers.ErrUnavailable)
	}
	wait := c.o.QueryTime
	if errors.Is(fault, drivers.ErrUnavailable) {
		wait = 2 * time.Second // the controller does not answer: a serial timeout
	}
	if err := c.o.Clock.Sleep(ctx, c.wall(wait)); err != nil {
		return fmt.Errorf("cryostat %q: %s: %w", c.o.Name, what, err)
	}
	if fault != nil {
		return fmt.Errorf("cryostat %q: %s: %w", c.o.Name, what, fault)
	}
	return nil
}

// ErrSensor marks a reading the controller could not make (open or shorted
// sensor), as a controller reports it.
var ErrSensor = errors.New("temperature sensor fault")

// InjectFault queues err for the next call (drivers.ErrUnavailable: the
// controller does not answer for 2 s of instrument time, then the call
// fails; ErrSensor or anything else: the call fails at once after its query
// time).
func (c *Cryostat) InjectFault(err error) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.faults = append(c.faults, err)
}

// TemperatureK reads the sample temperature, with the reading noise.
func (c *Cryostat) TemperatureK(ctx context.Context) (float64, error) {
	if err := c.begin(ctx, "read temperature"); err != nil {
		return 0, err
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	t := c.sampleAtLocked(c.nowS())
	if c.o.NoiseK > 0 {
		t += c.o.NoiseK * c.rng.NormFloat64()
	}
	return t, nil
}

// SampleK is the true, noise-free sample temperature now: what the lattice
// of the simulated dot is at, for its phonons. It takes no instrument time.
func (c *Cryostat) SampleK() float64 {
	if b := c.steadyBits.Load(); b != steadyNone {
		return math.Float64frombits(b)
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.sampleAtLocked(c.nowS())
}

// SetSetpointK sets the setpoint; it does not wait. A setpoint outside
// [MinK, MaxK] wraps drivers.ErrLimit and changes nothing.
func (c *Cryostat) SetSetpointK(ctx context.Context, k float64) error {
	if !(k >= c.o.MinK && k <= c.o.MaxK) {
		return fmt.Errorf("cryostat %q: setpoint_k %g outside %g to %g K: %w", c.o.Name, k, c.o.MinK, c.o.MaxK, drivers.ErrLimit)
	}
	if err := c.begin(ctx, fmt.Sprintf("set setpoint %g K", k)); err != nil {
		return err
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	s := c.nowS()
	c.fromK = c.smoothAtLocked(s)
	c.changedS = s
	c.setpointK = k
	c.updateSteadyLocked()
	return nil
}

func (c *Cryostat) oscillationLocked(s float64) float64 {
	if c.o.OscillationK == 0 {
		return 0
	}
	return c.o.OscillationK * math.Sin(2*math.Pi*s/c.o.OscillationPeriod.Seconds())
}

// SetpointK reads the setpoint.
func (c *Cryostat) SetpointK(ctx context.Context) (float64, error) {
	if err := c.begin(ctx, "read setpoint"); err != nil {
		return 0, err
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.setpointK, nil
}

// RangeK is the allowed setpoint range.
func (c *Cryostat) RangeK() (minK, maxK float64) { return c.o.MinK, c.o.MaxK }

// Identify names the instrument, as an SCPI *IDN? reply would.
func (c *Cryostat) Identify(ctx context.Context) (string, error) {
	if err := c.begin(ctx, "identify"); err != nil {
		return "", err
	}
	return "gliss sim cryostat v1 (" + c.o.Name + ")", nil
}

// Close releases the instrument. It is safe to call twice.
func (c *Cryostat) Close() error {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.closed = true
	return nil
}
