package bench

import (
	"container/list"
	"context"
	"fmt"
	"math"
	"sync"
	"sync/atomic"
	"time"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/sim/model"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// maxGate is the longest gate the simulated counter accepts (invented).
const maxGate = time.Hour

// Counter is the simulated two-channel photon counter behind the X and XX
// spectral filters. It implements drivers.Counter and drivers.Identifier.
//
// One gate: the optical state is read at the gate's start (if the stage,
// plate or laser is moving, the position at that instant is used for the
// whole gate); the laser's power noise for the gate is drawn from the
// counter's own stream (one relative deviate of σ PowerNoiseRel, held for the
// gate); the dot model is solved once at GDD = true stretcher(stage mm),
// Θ = π·sqrt(P/P1) with P = true Malus(angle) × laser noise, and the laser's
// detuning, with the dot's phonons (Options.Bath) at the cryostat's
// noise-free sample temperature at the gate's start, rounded to 0.01 K, or
// at the setpoint after a successful stability wait (sim/phonon; without
// phonons the plain sim/model); the detection chain
// turns the yields into Poisson counts for the gate. The gate takes
// gate/Speed of wall time (none when Instant); the computation happens inside
// that time.
type Counter struct {
	*base
	busy atomic.Bool

	solveMu sync.Mutex
	solver  *phonon.Solver

	// lastOp caches the operation name of the last gate length ("count for
	// 100ms"): a scan repeats one gate, and formatting it cost a good part
	// of a cached gate.
	lastOp atomic.Pointer[gateOp]

	// The last gate's yields and their key, guarded by rngMu (held by draw):
	// a repeated optical state skips the shared cache's hashing and lock.
	// Entries are exact, so this changes speed, never counts.
	lastKey yieldKey
	lastY   [2]float64
	hasLast bool
}

type gateOp struct {
	gate time.Duration
	op   string
}

// opFor is "count for <gate>".
func (c *Counter) opFor(gate time.Duration) string {
	if g := c.lastOp.Load(); g != nil && g.gate == gate {
		return g.op
	}
	g := &gateOp{gate: gate, op: fmt.Sprintf("count for %v", gate)}
	c.lastOp.Store(g)
	return g.op
}

func newCounter(b *base) *Counter { return &Counter{base: b, solver: phonon.NewSolver()} }

// Channels are "x" (exciton line) and "xx" (biexciton line), the order of Count.
func (c *Counter) Channels() []string { return []string{"x", "xx"} }

// Count opens the gate for gate and returns the counts of x and xx.
func (c *Counter) Count(ctx context.Context, gate time.Duration) ([]uint64, error) {
	return c.CountInto(ctx, gate, nil)
}

// CountInto is Count with the counts appended to dst[:0]
// (drivers.CounterInto).
func (c *Counter) CountInto(ctx context.Context, gate time.Duration, dst []uint64) ([]uint64, error) {
	op := c.opFor(gate)
	if err := c.begin(ctx, op); err != nil {
		return nil, err
	}
	if gate <= 0 || gate > maxGate {
		return nil, fmt.Errorf("%s %q: %s: gate_ms %g outside (0, %g] ms: %w", c.kind, c.name, op,
			float64(gate)/float64(time.Millisecond), float64(maxGate/time.Millisecond), drivers.ErrLimit)
	}
	if !c.busy.CompareAndSwap(false, true) {
		return nil, fmt.Errorf("%s %q: %s: busy, a gate is open", c.kind, c.name, op)
	}
	defer c.busy.Store(false)
	if _, err := c.fault(ctx, op, false); err != nil {
		return nil, err
	}
	st := c.st
	start := st.readStart()
	sn := st.snap()

	counts, err := c.draw(sn, gate, dst)
	if err != nil {
		return nil, fmt.Errorf("%s %q: %s: %w", c.kind, c.name, op, err)
	}
	if err := st.sleepUntil(ctx, start.Add(st.wall(gate.Seconds()))); err != nil {
		return nil, fmt.Errorf("%s %q: %s: %w", c.kind, c.name, op, err)
	}
	return counts, nil
}

// draw computes one gate's counts at the optical state sn: the gate's laser
// noise, then the model's yields, then Poisson counts, all from the
// counter's own stream in that order. The counts are appended to out[:0].
func (c *Counter) draw(sn snapshot, gate time.Duration, out []uint64) ([]uint64, error) {
	t := &c.st.truth
	c.rngMu.Lock()
	defer c.rngMu.Unlock()
	noise := 1.0
	if t.powerNoiseRel > 0 {
		noise = math.Max(0, 1+t.powerNoiseRel*c.rng.NormFloat64())
	}
	p, err := t.pointAt(sn, noise)
	if err != nil {
		return nil, err
	}
	y, err := c.yields(p, t.bathAt(sn.sampleK))
	if err != nil {
		return nil, err
	}
	if cap(out) < len(t.chain.Efficiency) {
		out = make([]uint64, 0, len(t.chain.Efficiency))
	}
	return t.chain.Counts(c.rng, y[:], gate, out), nil
}

// pointAt is the dot model's point for an optical state, with the laser
// power multiplied by noise.
func (t *truth) pointAt(sn snapshot, noise float64) (model.Params, error) {
	p := t.dot
	p.GDDPS2 = t.line.GDDPS2(sn.stageMM) // the stretcher was checked in resolve
	p.AreaPi = t.areaPi(t.powerUW(sn.angleDeg) * noise)
	p.DetuningMeV = sn.detuningMeV
	return p, nil
}

// yields are the model's photon yields per pulse (n_x, n_xx) at p with the
// phonon bath b (the zero Bath: none), from the bench's cache or one solve.
func (c *Counter) yields(p model.Params, b phonon.Bath) ([2]float64, error) {
	key := yieldKey{p, b}
	if c.hasLast && key == c.lastKey {
		return c.lastY, nil
	}
	if y, ok := c.st.yields.get(key); ok {
		c.lastKey, c.lastY, c.hasLast = key, y, true
		return y, nil
	}
	c.solveMu.Lock()
	r, err := c.solver.Solve(p, &b)
	c.solveMu.Unlock()
	if err != nil {
		return [2]float64{}, fmt.Errorf("dot model at GDD %.4f ps², area %.4fπ, detuning %.4f meV, sample %.2f K: %w", p.GDDPS2, p.AreaPi, p.DetuningMeV, b.TemperatureK, err)
	}
	y := [2]float64{r.NX, r.NXX}
	c.st.yields.put(key, y)
	c.lastKey, c.lastY, c.hasLast = key, y, true
	return y, nil
}

// yieldKey is what a yield depends on: the exact model parameters and the
// phonon bath, whose temperature is the sample's rounded to 0.01 K
// (quantiseK), so the key is exact too.
type yieldKey struct {
	p model.Params
	b phonon.Bath
}

// yieldCache is a small least-recently-used map from exact model parameters
// and bath to yields. Entries are exact solutions, so hits and misses give
// the same numbers: the cache changes speed, never results.
type yieldCache struct {
	mu    sync.Mutex
	cap   int
	order *list.List // front: most recent; values *yieldEntry
	byKey map[yieldKey]*list.Element
}

type yieldEntry struct {
	key yieldKey
	y   [2]float64
}

func newYieldCache(capacity int) *yieldCache {
	return &yieldCache{cap: capacity, order: list.New(), byKey: make(map[yieldKey]*list.Element, capacity)}
}

func (yc *yieldCache) get(p yieldKey) ([2]float64, bool) {
	yc.mu.Lock()
	defer yc.mu.Unlock()
	if e, ok := yc.byKey[p]; ok {
		yc.order.MoveToFront(e)
		return e.Value.(*yieldEntry).y, true
	}
	return [2]float64{}, false
}

func (yc *yieldCache) put(p yieldKey, y [2]float64) {
	yc.mu.Lock()
	defer yc.mu.Unlock()
	if e, ok := yc.byKey[p]; ok {
		e.Value.(*yieldEntry).y = y
		yc.order.MoveToFront(e)
		return
	}
	yc.byKey[p] = yc.order.PushFront(&yieldEntry{key: p, y: y})
	for yc.order.Len() > yc.cap {
		last := yc.order.Back()
		yc.order.Remove(last)
		delete(yc.byKey, last.Value.(*yieldEntry).key)
	}
}
