package bench

import (
	"context"
	"fmt"
	"hash/fnv"
	"log/slog"
	"math"
	"math/rand/v2"
	"sync"
	"sync/atomic"
	"time"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/calib"
	"github.com/gliss-lab/gliss/sim/cryostat"
	"github.com/gliss-lab/gliss/sim/detection"
	"github.com/gliss-lab/gliss/sim/model"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// Demo instrument constants. The stage values come from the demo stretcher of
// PHYSICS.md (1200 mm, 25 mm/s, 50 mm/s²); the others are invented for the
// demo bench, within what such instruments do (common practice, no published
// source).
const (
	stageMinMM         = 0.0
	stageMaxMM         = 1200.0
	stageSpeedMMPerS   = 25.0
	stageAccelMMPerS2  = 50.0
	stageRepeatMM      = 0.001 // position repeatability σ on arrival, 1 µm (invented)
	stageStartMM       = 600.0 // power-on position: zero dispersion of the demo stretcher
	angleMinDeg        = 0.0
	angleMaxDeg        = 360.0
	rotSpeedDegPerS    = 20.0  // invented
	rotAccelDegPerS2   = 40.0  // invented
	angleRepeatDeg     = 0.005 // invented
	angleStartDeg      = 45.0  // power-on angle: extinction of the demo attenuator (θ0 + 45°)
	detuningMinMeV     = -2.0
	detuningMaxMeV     = 2.0
	tuneSpeedMeVPerS   = 2.0    // invented
	tuneAccelMeVPerS2  = 20.0   // invented
	tuneLockS          = 0.05   // time for the laser to relock after tuning, s (invented)
	detuningRepeatMeV  = 0.0005 // invented
	meterReadS         = 0.05   // power-meter averaging time of one reading, s (invented)
	meterFloorUW       = 0.0005 // power-meter absolute noise σ, 0.5 nW (invented)
	countRateMaxHz     = 2e6    // counter ceiling per channel (invented; below detector saturation)
	defaultTimeoutS    = 2.0    // timeout fault: how long a call waits for no reply, s (serial timeout; invented)
	defaultPowerNoise  = 0.01
	defaultMeterNoise  = 0.005
	defaultCouplingUW  = 1.0
	yieldCacheCapacity = 4096
)

// Options configures a simulated bench. The zero value of every truth field
// means the demo value of PHYSICS.md.
type Options struct {
	// Seed: same seed and same command sequence give the same readings and
	// counts bit for bit, whatever the timing.
	Seed uint64
	// Speed is the time scale: 100 runs motion, readings and gates 100× faster
	// than real time. 0 means 1.
	Speed float64
	// Instant makes every instrument answer at once (no sleeping at all), for
	// throughput benchmarks and tests.
	Instant bool
	// Dot is the true dot (zero value: model.DemoParams()). Its GDDPS2,
	// AreaPi and DetuningMeV are ignored: the bench sets them from the stage,
	// the attenuator and the laser.
	Dot model.Params
	// Chain is the true detection chain (zero value: detection.Demo()), with
	// channel 0 = "x" and channel 1 = "xx".
	Chain detection.Chain
	// Stretcher is the true stage mm → GDD law (zero: DemoStretcher()). It may
	// differ from the bench's Calibration so that calibration fits mean something.
	Stretcher calib.Stretcher
	// Attenuator is the true angle → power law (zero: DemoAttenuator()).
	Attenuator calib.Malus
	// CouplingUWPerPi2 is P1 in Θ = π·sqrt(P/P1), µW (zero: 1.0, demo dot).
	CouplingUWPerPi2 float64
	// PowerNoiseRel is the laser's relative power noise σ, drawn once per
	// gate and per power reading (zero: 0.01; negative: no noise).
	PowerNoiseRel float64
	// MeterNoiseRel is the power meter's relative reading noise σ
	// (zero: 0.005; negative: no noise).
	MeterNoiseRel float64
	// Bath is the true phonon bath of the dot (sim/phonon). nil means the
	// demo dot's phonons, phonon.DemoBath(); a bath with AlphaPS2 0 means no
	// phonons (the counter then solves the plain dot model, bit for bit).
	// Its TemperatureK is ignored: the phonons are at the sample temperature
	// of the cryostat (Cryostat), rounded to 0.01 K, or at the setpoint once
	// a stability wait has succeeded (Thermometer.WaitStableK).
	Bath *phonon.Bath
	// Cryostat configures the sample's cryostat (zero value:
	// cryostat.Demo(), 1.5–300 K starting at 4.2 K, τ 60 s). Its Speed,
	// Clock and Seed are the bench's: Speed is Options.Speed, the seed is
	// derived from Options.Seed, and on an Instant bench its clock advances
	// only by its own calls. The cryostat exists whether or not a
	// thermometer instrument is opened on it: without one, the sample stays
	// at InitialK.
	Cryostat cryostat.Options
	// Logger receives debug logs of moves and warnings of faults (nil: none).
	Logger *slog.Logger
}

// truth is the resolved physics of a bench: what the instruments really do.
type truth struct {
	dot           model.Params
	chain         detection.Chain
	stretcher     calib.Stretcher
	line          calib.StretcherLine // stretcher's law, slope computed once
	malus         calib.Malus
	p1UW          float64
	powerNoiseRel float64
	meterNoiseRel float64
	bath          phonon.Bath // AlphaPS2 0: no phonons
}

// bathAt is the phonon bath with the sample at k kelvin (rounded to
// sampleQuantumK), or the zero Bath when the dot has no phonons.
func (t *truth) bathAt(k float64) phonon.Bath {
	if t.bath.AlphaPS2 == 0 {
		return phonon.Bath{}
	}
	b := t.bath
	b.TemperatureK = quantiseK(k)
	return b
}

func resolveNoise(field string, v, def float64) (float64, error) {
	switch {
	case math.IsNaN(v) || math.IsInf(v, 0):
		return 0, fmt.Errorf("Options.%s %g: must be finite (0 means %g, negative means none)", field, v, def)
	case v == 0:
		return def, nil
	case v < 0:
		return 0, nil
	case v > 0.5:
		return 0, fmt.Errorf("Options.%s %g: must be at most 0.5 (relative σ)", field, v)
	}
	return v, nil
}

func (o Options) resolve() (truth, float64, error) {
	speed := o.Speed
	if speed == 0 {
		speed = 1
	}
	if math.IsNaN(speed) || math.IsInf(speed, 0) || speed <= 0 {
		return truth{}, 0, fmt.Errorf("Options.Speed %g: must be > 0 and finite (0 means 1)", o.Speed)
	}
	t := truth{dot: o.Dot, chain: o.Chain, stretcher: o.Stretcher, malus: o.Attenuator, p1UW: o.CouplingUWPerPi2}
	if t.dot == (model.Params{}) {
		t.dot = model.DemoParams()
	}
	if t.chain.RepRateHz == 0 && len(t.chain.Efficiency) == 0 && len(t.chain.DarkHz) == 0 {
		t.chain = detection.Demo()
	}
	if err := checkChain(t.chain); err != nil {
		return truth{}, 0, err
	}
	dot := t.dot
	dot.GDDPS2, dot.AreaPi, dot.DetuningMeV = 0, 0, 0 // set by the bench
	if err := dot.Validate(); err != nil {
		return truth{}, 0, fmt.Errorf("Options.Dot: %w", err)
	}
	if t.stretcher == (calib.Stretcher{}) {
		t.stretcher = DemoStretcher()
	}
	line, err := t.stretcher.Line()
	if err != nil {
		return truth{}, 0, fmt.Errorf("Options.Stretcher: %w", err)
	}
	t.line = line
	if t.malus == (calib.Malus{}) {
		t.malus = DemoAttenuator()
	}
	if !(t.malus.PMinUW >= 0 && t.malus.PMaxUW > t.malus.PMinUW) || math.IsInf(t.malus.PMaxUW, 0) || math.IsNaN(t.malus.Theta0Deg) || math.IsInf(t.malus.Theta0Deg, 0) {
		return truth{}, 0, fmt.Errorf("Options.Attenuator: PMinUW %g, PMaxUW %g: want 0 ≤ PMinUW < PMaxUW, finite", t.malus.PMinUW, t.malus.PMaxUW)
	}
	switch {
	case t.p1UW == 0:
		t.p1UW = defaultCouplingUW
	case !(t.p1UW > 0) || math.IsInf(t.p1UW, 0):
		return truth{}, 0, fmt.Errorf("Options.CouplingUWPerPi2 %g: must be > 0 µW (0 means %g)", o.CouplingUWPerPi2, defaultCouplingUW)
	}
	// The whole reachable range must be a valid model point: GDD over the
	// travel, and the area at full power with 4σ of laser noise.
	for _, mm := range []float64{stageMinMM, stageMaxMM} {
		if g, _ := t.stretcher.GDDPS2(mm); math.Abs(g) > model.MaxAbsGDDPS2 {
			return truth{}, 0, fmt.Errorf("Options.Stretcher: GDD %g ps² at %g mm of travel, beyond the model's ±%g ps²", g, mm, model.MaxAbsGDDPS2)
		}
	}
	if t.powerNoiseRel, err = resolveNoise("PowerNoiseRel", o.PowerNoiseRel, defaultPowerNoise); err != nil {
		return truth{}, 0, err
	}
	if t.meterNoiseRel, err = resolveNoise("MeterNoiseRel", o.MeterNoiseRel, defaultMeterNoise); err != nil {
		return truth{}, 0, err
	}
	switch {
	case o.Bath == nil:
		t.bath = phonon.DemoBath()
	case o.Bath.AlphaPS2 == 0:
		t.bath = phonon.Bath{}
	default:
		t.bath = *o.Bath
		t.bath.TemperatureK = phonon.DemoBath().TemperatureK // set from the cryostat at every gate
		if err := t.bath.Validate(); err != nil {
			return truth{}, 0, fmt.Errorf("Options.Bath: %w", err)
		}
	}
	if a := t.areaPi(t.malus.PMaxUW * (1 + 4*t.powerNoiseRel)); a > model.MaxAreaPi {
		return truth{}, 0, fmt.Errorf("Options.CouplingUWPerPi2 %g µW: area %.3gπ at %g µW (+4σ laser noise), beyond the model's %gπ", t.p1UW, a, t.malus.PMaxUW, model.MaxAreaPi)
	}
	return t, speed, nil
}

func checkChain(c detection.Chain) error {
	if len(c.Efficiency) != 2 || len(c.DarkHz) > 2 {
		return fmt.Errorf("Options.Chain: %d efficiencies and %d dark rates, want 2 channels (x, xx)", len(c.Efficiency), len(c.DarkHz))
	}
	if !(c.RepRateHz > 0) || math.IsInf(c.RepRateHz, 0) {
		return fmt.Errorf("Options.Chain.RepRateHz %g: must be > 0", c.RepRateHz)
	}
	for i, e := range c.Efficiency {
		if !(e >= 0 && e <= 1) {
			return fmt.Errorf("Options.Chain.Efficiency[%d] %g: outside [0, 1]", i, e)
		}
	}
	for i, d := range c.DarkHz {
		if !(d >= 0) || math.IsInf(d, 0) {
			return fmt.Errorf("Options.Chain.DarkHz[%d] %g: must be ≥ 0 and finite", i, d)
		}
	}
	if !(c.DeadTimeNS >= 0) || math.IsInf(c.DeadTimeNS, 0) {
		return fmt.Errorf("Options.Chain.DeadTimeNS %g: must be ≥ 0 and finite", c.DeadTimeNS)
	}
	return nil
}

// state is the one optical state that all instruments of a simulated bench
// share: where the stage, the half-wave plate and the laser are, and which
// faults are armed. mu guards every field below it; it is never held while
// sleeping or solving.
type state struct {
	seed    uint64
	speed   float64 // instrument seconds per wall second
	instant bool
	truth   truth
	log     *slog.Logger
	now     func() time.Time
	yields  *yieldCache
	// cryo is the sample's cryostat: the thermometer instrument controls it,
	// the counter reads its noise-free sample temperature for the phonons.
	// It has its own lock; st.mu is never held while calling it.
	cryo *cryostat.Cryostat

	mu       sync.Mutex
	stage    axis              // mm
	angle    axis              // deg
	detuning axis              // meV
	owners   map[string]string // role "stage"/"attenuator"/"laser" → instrument name
	names    map[string]bool   // instrument names in use
	faults   map[string]*Fault // instrument name → armed fault
	// nFaults is len(faults), stored under mu after every change of it and
	// read without mu: a call with no fault armed anywhere skips the lock.
	nFaults atomic.Int32
	// settled: the last stability wait succeeded at settledK and the
	// setpoint has not changed since; the counter's phonons are then at
	// settledK (see Thermometer.WaitStableK).
	settled  bool
	settledK float64
}

func newState(o Options) (*state, error) {
	t, speed, err := o.resolve()
	if err != nil {
		return nil, err
	}
	lg := o.Logger
	if lg == nil {
		lg = slog.New(slog.DiscardHandler)
	}
	st := &state{
		seed: o.Seed, speed: speed, instant: o.Instant, truth: t,
		log: lg.With("bench", "sim"), now: time.Now,
		yields:   newYieldCache(yieldCacheCapacity),
		stage:    axis{prof: profile{stageSpeedMMPerS, stageAccelMMPerS2}, pos: stageStartMM},
		angle:    axis{prof: profile{rotSpeedDegPerS, rotAccelDegPerS2}, pos: angleStartDeg},
		detuning: axis{prof: profile{tuneSpeedMeVPerS, tuneAccelMeVPerS2}, pos: 0},
		owners:   map[string]string{},
		names:    map[string]bool{},
		faults:   map[string]*Fault{},
	}
	if st.cryo, err = newCryostat(o.Cryostat, o.Seed, speed, o.Instant, st); err != nil {
		return nil, err
	}
	if k := st.cryo.Options().MaxK; t.bath.AlphaPS2 != 0 && k > phonon.MaxTemperatureK {
		return nil, fmt.Errorf("Options.Cryostat: MaxK %g K beyond the phonon model's %g K", k, phonon.MaxTemperatureK)
	}
	return st, nil
}

// claim registers an instrument name (and, for actuators, the role: one
// optical state has one stage, one attenuator and one laser).
func (st *state) claim(name, role string, actuator bool) error {
	st.mu.Lock()
	defer st.mu.Unlock()
	if st.names[name] {
		return fmt.Errorf("sim bench: instrument name %q used twice", name)
	}
	if actuator {
		if other, ok := st.owners[role]; ok {
			return fmt.Errorf("sim bench: %s %q: this optical state already has a %s (%q)", role, name, role, other)
		}
		st.owners[role] = name
	}
	st.names[name] = true
	return nil
}

func (st *state) release(name, role string) {
	st.mu.Lock()
	defer st.mu.Unlock()
	delete(st.names, name)
	if st.owners[role] == name {
		delete(st.owners, role)
	}
	delete(st.faults, name)
	st.nFaults.Store(int32(len(st.faults)))
}

// rngFor derives an instrument's own random stream from the bench seed and
// the instrument's name, so that each instrument's numbers depend only on
// its own command sequence, not on how the engine interleaves instruments.
func rngFor(seed uint64, name string) *rand.Rand {
	h := fnv.New64a()
	h.Write([]byte("gliss sim instrument\x00"))
	h.Write([]byte(name))
	return rand.New(rand.NewPCG(seed, h.Sum64()))
}

// wall converts instrument seconds to a wall-clock duration (0 when instant).
func (st *state) wall(s float64) time.Duration {
	if st.instant || s <= 0 {
		return 0
	}
	return durationOf(s / st.speed)
}

// readStart is the wall time a reading starts, for sleepUntil; an Instant
// bench never sleeps, so it reads no clock (zero time).
func (st *state) readStart() time.Time {
	if st.instant {
		return time.Time{}
	}
	return st.now()
}

// sleepUntil waits until the wall-clock deadline or the context's end.
func (st *state) sleepUntil(ctx context.Context, deadline time.Time) error {
	if st.instant {
		return ctx.Err()
	}
	return drivers.Wait(ctx, deadline.Sub(st.now()))
}

// snapshot is the optical state at one instant, as the counter and the
// power meter see it.
type snapshot struct {
	stageMM, angleDeg, detuningMeV float64
	// sampleK is the sample temperature the phonons see: the setpoint of
	// a settled sample, else the cryostat's noise-free sample temperature.
	sampleK float64
}

func (st *state) snap() snapshot {
	k := st.cryo.SampleK() // outside st.mu: the cryostat has its own lock
	st.mu.Lock()
	defer st.mu.Unlock()
	if st.settled {
		k = st.settledK
	}
	var now time.Time
	if st.stage.mv != nil || st.angle.mv != nil || st.detuning.mv != nil {
		now = st.now() // still axes need no clock (a clock read is pure)
	}
	return snapshot{
		stageMM:     st.stage.at(now, st.speed),
		angleDeg:    st.angle.at(now, st.speed),
		detuningMeV: st.detuning.at(now, st.speed),
		sampleK:     k,
	}
}

// powerUW is the true average power on the sample at angle deg, before laser noise.
func (t truth) powerUW(deg float64) float64 { return t.malus.PowerUW(deg) }

// areaPi is the pulse area in units of π for true average power p µW:
// Θ = π·sqrt(P/P1) (PHYSICS.md, demo dot coupling).
func (t truth) areaPi(pUW float64) float64 {
	if pUW <= 0 {
		return 0
	}
	return math.Sqrt(pUW / t.p1UW)
}
