package bench

import (
	"context"
	"fmt"
	"hash/fnv"
	"math"
	"sync/atomic"
	"time"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/sim/cryostat"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// sampleQuantumK is the step to which the counter rounds the sample
// temperature before it solves the phonon model. The demo cryostat settles
// within ±0.05 K, and at 4 K a 5 mK error moves the phonon occupation
// n(ω) = 1/(exp(ħω/kT) − 1) of the 1 meV modes that matter by about 0.3 %
// (d ln n / d ln T = x·eˣ/(eˣ − 1) with x = ħω/kT ≈ 2.8, times 5 mK / 4 K),
// far below the Poisson scatter of a gate. Rounding lets gates at one
// temperature share cached yields, and makes the key of the cache exact.
// (A settled sample needs no rounding: see Thermometer.WaitStableK.)
const sampleQuantumK = 0.01

// quantiseK rounds a sample temperature to sampleQuantumK, within the
// phonon model's range. Dividing by 100 (not multiplying by 0.01) gives the
// double nearest to the decimal value: 4.2 K stays 4.2.
func quantiseK(k float64) float64 {
	q := math.Round(k/sampleQuantumK) / (1 / sampleQuantumK)
	return math.Min(phonon.MaxTemperatureK, math.Max(0, q))
}

// stateClock is the cryostat's time source on a timed bench: the state's
// clock (which tests may freeze), sleeping on the state's timer.
type stateClock struct{ st *state }

func (c stateClock) Now() time.Time { return c.st.now() }

func (c stateClock) Sleep(ctx context.Context, d time.Duration) error {
	return drivers.Wait(ctx, d)
}

// stepClock is the cryostat's time source on an Instant bench: nothing
// sleeps, and a sleep moves the clock on at once. The sample's temperature
// then evolves only through the cryostat's own calls (query times, the polls
// of a stability wait), so an Instant bench stays deterministic bit for bit
// and a 30-minute stability wait costs microseconds.
type stepClock struct {
	origin time.Time
	ns     atomic.Int64 // time since origin; read on every point, so no lock
}

func (c *stepClock) Now() time.Time { return c.origin.Add(time.Duration(c.ns.Load())) }

func (c *stepClock) Sleep(ctx context.Context, d time.Duration) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	if d > 0 {
		c.ns.Add(int64(d))
	}
	return nil
}

// newCryostat makes the sample's cryostat of a state: o with the bench's
// time scale, clock and a seed derived from the bench seed.
func newCryostat(o cryostat.Options, seed uint64, speed float64, instant bool, st *state) (*cryostat.Cryostat, error) {
	o.Speed = speed
	if instant {
		o.Clock = &stepClock{origin: time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)}
	} else {
		o.Clock = stateClock{st}
	}
	h := fnv.New64a()
	h.Write([]byte("gliss sim sample cryostat"))
	o.Seed = seed ^ h.Sum64()
	c, err := cryostat.New(o)
	if err != nil {
		return nil, fmt.Errorf("Options.Cryostat: %w", err)
	}
	return c, nil
}

func thermometerLimits(c *cryostat.Cryostat) drivers.Limits {
	lo, hi := c.RangeK()
	return drivers.Limits{TemperatureMinK: lo, TemperatureMaxK: hi, TemperatureTimeConstantS: c.Options().TimeConstant.Seconds()}
}

// Thermometer is the simulated cryostat's temperature controller
// (sim/cryostat) on the bench: it sets and reads the temperature of the
// sample whose phonons the counter sees. The sample approaches a new
// setpoint to first order (demo τ 60 s), readings carry 0.01 K of noise,
// every call takes a 50 ms query, all in instrument time scaled by
// Options.Speed (on an Instant bench the cryostat's clock advances by its
// own calls only). It implements drivers.Thermometer, drivers.Stabilizer
// and drivers.Identifier; faults armed with InjectFault apply to it like to
// the other instruments.
type Thermometer struct {
	*base
	c *cryostat.Cryostat
}

// TemperatureK reads the sample temperature, with the reading noise.
func (t *Thermometer) TemperatureK(ctx context.Context) (float64, error) {
	const op = "read temperature"
	if err := t.begin(ctx, op); err != nil {
		return 0, err
	}
	if _, err := t.fault(ctx, op, false); err != nil {
		return 0, err
	}
	return t.c.TemperatureK(ctx)
}

// SetSetpointK sets the setpoint; it does not wait. A setpoint outside the
// cryostat's range wraps drivers.ErrLimit and changes nothing.
func (t *Thermometer) SetSetpointK(ctx context.Context, k float64) error {
	op := fmt.Sprintf("set setpoint %g K", k)
	if err := t.begin(ctx, op); err != nil {
		return err
	}
	if lo, hi := t.c.RangeK(); !(k >= lo && k <= hi) {
		return fmt.Errorf("%s %q: %s: setpoint_k %g outside [%g, %g] K: %w", t.kind, t.name, op, k, lo, hi, drivers.ErrLimit)
	}
	if _, err := t.fault(ctx, op, false); err != nil {
		return err
	}
	if err := t.c.SetSetpointK(ctx, k); err != nil {
		return err
	}
	t.st.setSettled(false, 0)
	return nil
}

// WaitStableK waits until the readings stay within ±tolK of setpointK for
// hold, giving up after timeout with a *cryostat.StabilityError (wrapping
// cryostat.ErrNotStable) that says why. hold and timeout are instrument
// time, like every other duration of the simulated bench.
//
// After a successful wait, and until the next setpoint, the counter takes
// the phonons at setpointK itself. The sample is then within the wait's
// band of it (readings within ±tolK for hold; at the end of the demo wait,
// ±0.05 K held 30 s, typically 0.02–0.03 K short of it), a difference
// that moves the phonon occupation by well under 1 % at 4 K and above
// (see sampleQuantumK); in exchange the counts of settled points do not
// depend on exactly when each gate opens, so a timed bench and an Instant
// one (a replay) give the same counts bit for bit. Before the wait, during
// it, and after a failed one, the counter uses the sample's own temperature.
func (t *Thermometer) WaitStableK(ctx context.Context, setpointK, tolK float64, hold, timeout time.Duration) error {
	op := fmt.Sprintf("wait for %g K", setpointK)
	if err := t.begin(ctx, op); err != nil {
		return err
	}
	if _, err := t.fault(ctx, op, false); err != nil {
		return err
	}
	if err := t.c.WaitStableK(ctx, setpointK, tolK, hold, timeout); err != nil {
		return err
	}
	t.st.setSettled(true, setpointK)
	return nil
}

// setSettled records whether the sample has settled at k (see
// Thermometer.WaitStableK).
func (st *state) setSettled(settled bool, k float64) {
	st.mu.Lock()
	defer st.mu.Unlock()
	st.settled, st.settledK = settled, k
}

// SampleK is the true, noise-free sample temperature now (no instrument
// time), the one the counter uses, rounded to 0.01 K, unless the sample has
// settled (WaitStableK).
func (t *Thermometer) SampleK() float64 { return t.c.SampleK() }

var (
	_ drivers.Thermometer = (*Thermometer)(nil)
	_ drivers.Stabilizer  = (*Thermometer)(nil)
	_ drivers.Identifier  = (*Thermometer)(nil)
)
