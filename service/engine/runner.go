package engine

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strings"
	"time"

	"golang.org/x/sync/errgroup"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/service/sweep"
)

// Run executes queued scans one at a time until ctx is cancelled. On
// cancellation the current point is finished and stored, the scan becomes
// INTERRUPTED ("glissd shut down") so that it can be resumed, and Run
// returns once the store has everything.
func (e *Engine) Run(ctx context.Context) error {
	for {
		r := e.next()
		if r == nil {
			select {
			case <-ctx.Done():
				return e.store.Sync(context.WithoutCancel(ctx))
			case <-e.wake:
				continue
			}
		}
		e.runScan(ctx, r)
		if ctx.Err() != nil {
			return e.store.Sync(context.WithoutCancel(ctx))
		}
	}
}

// next takes the first runnable queued scan and gives it the bench.
func (e *Engine) next() *run {
	e.mu.Lock()
	defer e.mu.Unlock()
	if e.holder != "" {
		return nil
	}
	for _, r := range e.queue {
		if glissv1.ScanState(r.state.Load()) == glissv1.ScanState_SCAN_STATE_QUEUED {
			e.holder = r.rec.Id
			for i, q := range e.queue {
				if q == r {
					e.queue = append(e.queue[:i], e.queue[i+1:]...)
					break
				}
			}
			return r
		}
	}
	return nil
}

func (e *Engine) release(r *run) {
	st := glissv1.ScanState(r.state.Load())
	terminal := isTerminal(st) || st == glissv1.ScanState_SCAN_STATE_INTERRUPTED
	e.mu.Lock()
	if e.holder == r.rec.Id {
		e.holder = ""
	}
	if terminal {
		delete(e.runs, r.rec.Id)
	}
	e.mu.Unlock()
	e.signal()
}

// runScan acquires the points of one scan from its first point not stored.
func (e *Engine) runScan(ctx context.Context, r *run) {
	defer e.release(r)
	id := r.rec.Id
	start, err := e.store.PointCount(id)
	if err != nil {
		e.endWith(ctx, r, glissv1.ScanState_SCAN_STATE_PAUSED, fmt.Sprintf("cannot read the stored point count: %v", err))
		return
	}
	r.setDurable(start)
	r.pmu.Lock()
	r.recent = r.recent[:0]
	r.pmu.Unlock()
	r.mu.Lock()
	reason := "started"
	if start > 0 {
		reason = fmt.Sprintf("continuing from point %d of %d", start, r.sweep.Points)
	}
	err = e.transitionLocked(ctx, r, glissv1.ScanState_SCAN_STATE_RUNNING, reason)
	r.mu.Unlock()
	if err != nil {
		e.log.Error("record state", "scan", id, "err", err)
	}

	r.wd = newWatchdog(ctx)
	defer r.wd.close()
	storeCtx := context.WithoutCancel(ctx) // points are stored even during shutdown
	last := sweep.Target{}                 // what this run has commanded so far
	if err := e.setFixed(ctx, r, &last); err != nil {
		if !e.holdOnError(ctx, r, fmt.Sprintf("fixed settings: %v", err), err, &last) {
			return
		}
	}
	// One callback for every point of the run: the store hands the point back.
	durable := func(p *glissv1.Point, err error) { e.pointDurable(r, p, err) }
	ceilings := e.countCeilings(r)
	for seq := start; seq < r.sweep.Points; {
		// Control requests take effect between points.
		stop, held := e.between(ctx, r, &last)
		if stop {
			return
		}
		if held {
			// Points queued before the pause may have failed to store:
			// continue from the first point the store does not have.
			seq = e.waitStored(ctx, r)
			continue
		}
		p, err := e.acquire(ctx, r, seq, &last)
		if err != nil {
			if !e.holdOnError(ctx, r, fmt.Sprintf("point %d: %v", seq, err), err, &last) {
				return
			}
			// Resumed: restart from the first point not stored.
			seq = e.waitStored(ctx, r)
			continue
		}
		if err := e.store.AppendPoint(storeCtx, p, durable); err != nil {
			if !e.holdOnError(ctx, r, fmt.Sprintf("point %d: %v", seq, err), err, &last) {
				return
			}
			seq = e.waitStored(ctx, r)
			continue
		}
		seq++
		if msg := e.interlockAfter(ctx, r, p, ceilings); msg != "" {
			r.mu.Lock()
			r.pauseSet, r.pauseReq = true, msg
			r.attention.Store(true)
			r.mu.Unlock()
		}
	}
	// Every point is queued: wait until the store has them all.
	if err := e.store.Sync(context.WithoutCancel(ctx)); err != nil {
		e.endWith(ctx, r, glissv1.ScanState_SCAN_STATE_PAUSED, fmt.Sprintf("store: %v", err))
		return
	}
	if n := e.durableOrStored(r); n != r.sweep.Points {
		// A write failed after the last point was queued.
		if !e.holdOnError(ctx, r, fmt.Sprintf("store has %d of %d points", n, r.sweep.Points), nil, &last) {
			return
		}
		e.runScanTail(ctx, r)
		return
	}
	e.endWith(ctx, r, glissv1.ScanState_SCAN_STATE_SUCCEEDED, fmt.Sprintf("all %d points stored", r.sweep.Points))
}

// runScanTail re-enters runScan's loop after a late write error was resolved
// by a resume; the bench is still held.
func (e *Engine) runScanTail(ctx context.Context, r *run) {
	e.mu.Lock()
	e.holder = r.rec.Id
	e.mu.Unlock()
	r.mu.Lock()
	r.rec.State = glissv1.ScanState_SCAN_STATE_QUEUED // runScan records QUEUED→RUNNING as a resume
	r.state.Store(int32(r.rec.State))
	r.mu.Unlock()
	e.runScan(ctx, r)
}

func (e *Engine) durableOrStored(r *run) uint64 { return r.durableCount() }

// waitStored waits for the store to settle and returns the stored count.
func (e *Engine) waitStored(ctx context.Context, r *run) uint64 {
	_ = e.store.Sync(context.WithoutCancel(ctx))
	n, err := e.store.PointCount(r.rec.Id)
	if err != nil {
		return e.durableOrStored(r)
	}
	r.setDurable(n)
	return n
}

// pointDurable is the store's callback: only now may anyone hear of p.
func (e *Engine) pointDurable(r *run, p *glissv1.Point, err error) {
	r.pmu.Lock()
	if err != nil {
		// The runner pauses before its next point (see between).
		if r.writeErr == nil {
			r.writeErr = fmt.Errorf("store write failed at point %d: %w", p.Seq, err)
			r.attention.Store(true)
		}
		r.pmu.Unlock()
		return
	}
	if p.Seq+1 > r.durable {
		r.durable = p.Seq + 1
	}
	if len(r.recent) >= recentCap {
		n := copy(r.recent, r.recent[recentCap/2:])
		r.recent = r.recent[:n]
	}
	r.recent = append(r.recent, p)
	r.pmu.Unlock()
	// One wake-up per burst of durable points (a commit calls back for
	// each of its points in a row): the flag is cleared before the
	// watchers are woken, so a point made durable after the clear gets a
	// wake-up of its own and none is missed.
	if r.notifyPending.CompareAndSwap(false, true) {
		go func() {
			r.notifyPending.Store(false)
			e.notify(r.rec.Id)
		}()
	}
}

// between handles pause and cancel requests and daemon shutdown; stop is
// true when the runner must stop working on this scan, held when it was
// paused and resumed.
func (e *Engine) between(ctx context.Context, r *run, last *sweep.Target) (stop, held bool) {
	for {
		if !r.attention.Load() && ctx.Err() == nil {
			return false, held // nothing requested, nothing failed: no lock taken
		}
		if err := r.takeWriteErr(); err != nil {
			if !e.hold(ctx, r, err.Error(), nil, last) {
				return true, held
			}
			held = true
			continue
		}
		r.mu.Lock()
		switch {
		case r.cancelSet:
			reason := r.cancelReq
			r.mu.Unlock()
			e.endWith(ctx, r, glissv1.ScanState_SCAN_STATE_CANCELLED, reason)
			return true, held
		case ctx.Err() != nil:
			r.mu.Unlock()
			e.endWith(ctx, r, glissv1.ScanState_SCAN_STATE_INTERRUPTED, "glissd shut down; resume with gliss scan resume")
			return true, held
		case r.pauseSet:
			reason := r.pauseReq
			r.pauseSet = false
			r.mu.Unlock()
			if !e.hold(ctx, r, reason, nil, last) {
				return true, held
			}
			held = true
			continue
		}
		// Nothing left to act on. A write error that arrives now sets the
		// flag again after this store (pmu, then the flag, in pointDurable).
		r.attention.Store(false)
		if r.writeErrPending() {
			r.attention.Store(true)
		}
		r.mu.Unlock()
		return false, held
	}
}

// holdOnError pauses the scan with reason and waits; it returns false when
// the scan must stop (cancelled or shutdown). When cause is an instrument
// that stays unavailable (drivers.ErrUnavailable past its driver's retry
// budget), the instrument is probed with backoff while the scan is paused
// and the scan resumes by itself when it answers again.
func (e *Engine) holdOnError(ctx context.Context, r *run, reason string, cause error, last *sweep.Target) bool {
	e.log.Warn("scan paused on error", "scan", r.rec.Id, "reason", reason)
	*last = sweep.Target{} // instruments may be anywhere now: command everything again
	var probe *drivers.Entry
	var ie *instrumentError
	if errors.As(cause, &ie) && errors.Is(cause, drivers.ErrUnavailable) {
		probe = ie.entry
		reason += fmt.Sprintf("; %s %q is probed and the scan resumes by itself when it answers (or: gliss scan resume)", ie.entry.Role, ie.entry.Name)
	}
	if !e.hold(ctx, r, reason, probe, last) {
		return false
	}
	stop, _ := e.between(ctx, r, last)
	return !stop
}

// Probe backoff while a scan waits for an unavailable instrument, in the
// bench's time (divided by a simulated bench's time scale).
const (
	probeFirst = 500 * time.Millisecond
	probeMax   = 30 * time.Second
)

// hold records PAUSED and waits for resume, cancel or shutdown. It returns
// true on resume. With probe set (an unavailable instrument) it also probes
// that instrument with backoff and resumes by itself once it answers,
// unless an operator paused the scan meanwhile.
func (e *Engine) hold(ctx context.Context, r *run, reason string, probe *drivers.Entry, last *sweep.Target) bool {
	r.mu.Lock()
	if err := e.transitionLocked(ctx, r, glissv1.ScanState_SCAN_STATE_PAUSED, reason); err != nil {
		e.log.Error("record pause", "scan", r.rec.Id, "err", err)
	}
	r.autoResume = probe != nil
	resume := r.resume
	r.mu.Unlock()
	var probeC <-chan time.Time
	wait := max(e.bench.Scale(probeFirst), time.Millisecond)
	var timer *time.Timer
	if probe != nil {
		timer = time.NewTimer(wait)
		defer timer.Stop()
		probeC = timer.C
	}
	tries := 0
	for {
		select {
		case <-ctx.Done():
			e.endWith(ctx, r, glissv1.ScanState_SCAN_STATE_INTERRUPTED, "glissd shut down while the scan was paused ("+reason+")")
			return false
		case <-probeC:
			tries++
			perr := e.probe(ctx, probe)
			r.mu.Lock()
			switch {
			case !r.autoResume || r.cancelSet || r.rec.State != glissv1.ScanState_SCAN_STATE_PAUSED:
				// An operator took over: no more probing.
				probeC = nil
			case perr == nil:
				r.pauseSet, r.pauseReq, r.autoResume = false, "", false
				err := e.transitionLocked(ctx, r, glissv1.ScanState_SCAN_STATE_RUNNING,
					fmt.Sprintf("%s %q answers again (probe %d): resumed automatically", probe.Role, probe.Name, tries))
				r.mu.Unlock()
				if err != nil {
					e.log.Error("record resume", "scan", r.rec.Id, "err", err)
				}
				*last = sweep.Target{}
				return true
			default:
				e.log.Debug("instrument still unavailable", "scan", r.rec.Id, "instrument", probe.Name, "probe", tries, "err", perr)
				wait = min(2*wait, max(e.bench.Scale(probeMax), time.Millisecond))
				timer.Reset(wait)
			}
			r.mu.Unlock()
			continue
		case <-resume:
		}
		r.mu.Lock()
		if r.cancelSet {
			reason := r.cancelReq
			r.mu.Unlock()
			e.endWith(ctx, r, glissv1.ScanState_SCAN_STATE_CANCELLED, reason)
			return false
		}
		if r.rec.State == glissv1.ScanState_SCAN_STATE_PAUSED && !r.pauseSet {
			r.autoResume = false
			err := e.transitionLocked(ctx, r, glissv1.ScanState_SCAN_STATE_RUNNING, "resumed")
			r.mu.Unlock()
			if err != nil {
				e.log.Error("record resume", "scan", r.rec.Id, "err", err)
			}
			*last = sweep.Target{}
			return true
		}
		resume = r.resume
		r.mu.Unlock()
	}
}

// probe asks an instrument whether it answers: its identity when it has
// one, else a reading of its role. Nothing moves.
func (e *Engine) probe(ctx context.Context, en *drivers.Entry) error {
	pctx, cancel := context.WithTimeout(ctx, e.opts.PointTimeout)
	defer cancel()
	if id, ok := en.Inst.(drivers.Identifier); ok {
		_, err := id.Identify(pctx)
		return err
	}
	var err error
	switch inst := en.Inst.(type) {
	case drivers.Stage:
		_, err = inst.PositionMM(pctx)
	case drivers.Attenuator:
		_, err = inst.AngleDeg(pctx)
	case drivers.PowerMeter:
		_, err = inst.PowerUW(pctx)
	case drivers.Laser:
		_, err = inst.DetuningMeV(pctx)
	case drivers.Thermometer:
		_, err = inst.TemperatureK(pctx)
	case drivers.Counter:
		_, err = inst.Count(pctx, time.Millisecond)
	default:
		err = fmt.Errorf("%s %q: no way to probe it", en.Role, en.Name)
	}
	return err
}

// instrumentError is an error of one instrument of the bench.
type instrumentError struct {
	entry *drivers.Entry
	err   error
}

func (e *instrumentError) Error() string { return e.err.Error() }
func (e *instrumentError) Unwrap() error { return e.err }

// instFail is the error of an instrument's failed action: `KIND "NAME":
// ACTION: CAUSE`; or the driver's own error when that already begins by
// naming the instrument (`ROLE "NAME": …` or `KIND "NAME": …`, as gliss's
// drivers write it, with their action), so that no message says the same
// thing twice.
func instFail(b *drivers.Bench, r drivers.Role, kind, action string, cause error) error {
	name := ""
	if en := b.ByRole(r); en != nil {
		name = en.Name
	}
	msg := cause.Error()
	if strings.HasPrefix(msg, fmt.Sprintf("%s %q: ", r, name)) || strings.HasPrefix(msg, fmt.Sprintf("%s %q: ", kind, name)) {
		return instErr(b, r, cause)
	}
	return instErr(b, r, fmt.Errorf("%s %q: %s: %w", kind, name, action, cause))
}

func instErr(b *drivers.Bench, r drivers.Role, err error) error {
	if err == nil {
		return nil
	}
	if en := b.ByRole(r); en != nil {
		return &instrumentError{entry: en, err: err}
	}
	return err
}

func (e *Engine) endWith(ctx context.Context, r *run, to glissv1.ScanState, reason string) {
	_ = e.store.Sync(context.WithoutCancel(ctx))
	if n, err := e.store.PointCount(r.rec.Id); err == nil {
		r.setDurable(n)
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	if err := e.transitionLocked(ctx, r, to, reason); err != nil {
		e.log.Error("record end of scan", "scan", r.rec.Id, "err", err)
	}
}

// setFixed applies the spec's fixed settings.
func (e *Engine) setFixed(ctx context.Context, r *run, last *sweep.Target) error {
	t := r.sweep.Fixed
	if t == (sweep.Target{}) {
		return nil
	}
	if err := r.sweep.Check(t); err != nil {
		return err
	}
	pctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), e.opts.PointTimeout+e.tempBudget(r.sweep, t))
	defer cancel()
	return e.command(pctx, r.sweep, t, last)
}

// tempBudget is the extra time a point may take when it changes the
// temperature setpoint: the stability wait's timeout and hold.
func (e *Engine) tempBudget(p *sweep.Sweep, t sweep.Target) time.Duration {
	if t.TemperatureK == nil {
		return 0
	}
	return e.bench.Scale(p.TempTimeout + p.TempHold)
}

// waitStable waits until a thermometer without a stability wait of its own
// reads within ±tolK of setpointK for hold, polling it; after timeout it
// fails with the reason.
func waitStable(ctx context.Context, th drivers.Thermometer, setpointK, tolK float64, hold, timeout time.Duration) error {
	poll := min(max(hold/10, 100*time.Millisecond), 5*time.Second)
	start := time.Now()
	var since time.Time
	last := math.NaN()
	for {
		k, err := th.TemperatureK(ctx)
		if err != nil {
			return fmt.Errorf("wait for %.3f K: %w", setpointK, err)
		}
		last = k
		now := time.Now()
		if math.Abs(k-setpointK) <= tolK {
			if since.IsZero() {
				since = now
			}
			if now.Sub(since) >= hold {
				return nil
			}
		} else {
			since = time.Time{}
		}
		if now.Sub(start) >= timeout {
			return fmt.Errorf("temperature %.3f K not stable within ±%g K of setpoint %g K for %v after %v", last, tolK, setpointK, hold, timeout)
		}
		if err := sleep(ctx, poll); err != nil {
			return err
		}
	}
}

// command sets every instrument whose target changed, in parallel, and
// returns when all have arrived.
func (e *Engine) command(ctx context.Context, pl *sweep.Sweep, t sweep.Target, last *sweep.Target) error {
	changed := func(a, b *float64) bool { return a != nil && !same(a, b) }
	if !changed(t.StageMM, last.StageMM) && !changed(t.AngleDeg, last.AngleDeg) &&
		!changed(t.DetuningMeV, last.DetuningMeV) && !changed(t.TemperatureK, last.TemperatureK) {
		last.Merge(t) // nothing to move (a repeated setting)
		return nil
	}
	g, gctx := errgroup.WithContext(ctx)
	b := e.bench
	if t.StageMM != nil && !same(t.StageMM, last.StageMM) {
		s := b.Stage()
		mm := *t.StageMM
		g.Go(func() error {
			if err := s.MoveToMM(gctx, mm); err != nil {
				return instFail(b, drivers.RoleStage, "stage", fmt.Sprintf("move to %.3f mm", mm), err)
			}
			return nil
		})
	}
	if t.AngleDeg != nil && !same(t.AngleDeg, last.AngleDeg) {
		a := b.Attenuator()
		deg := *t.AngleDeg
		g.Go(func() error {
			if err := a.SetAngleDeg(gctx, deg); err != nil {
				return instFail(b, drivers.RoleAttenuator, "attenuator", fmt.Sprintf("rotate to %.3f°", deg), err)
			}
			return nil
		})
	}
	if t.DetuningMeV != nil && !same(t.DetuningMeV, last.DetuningMeV) {
		l := b.Laser()
		mev := *t.DetuningMeV
		g.Go(func() error {
			if err := l.SetDetuningMeV(gctx, mev); err != nil {
				return instFail(b, drivers.RoleLaser, "laser", fmt.Sprintf("detune to %.4f meV", mev), err)
			}
			return nil
		})
	}
	if t.TemperatureK != nil && !same(t.TemperatureK, last.TemperatureK) {
		th := b.Thermometer()
		k := *t.TemperatureK
		g.Go(func() error {
			if err := th.SetSetpointK(gctx, k); err != nil {
				return instFail(b, drivers.RoleThermometer, "thermometer", fmt.Sprintf("setpoint %.3f K", k), err)
			}
			if pl == nil {
				return nil
			}
			var err error
			if st, ok := th.(drivers.Stabilizer); ok {
				err = st.WaitStableK(gctx, k, pl.TempToleranceK, pl.TempHold, pl.TempTimeout)
			} else {
				err = waitStable(gctx, th, k, pl.TempToleranceK, b.Scale(pl.TempHold), b.Scale(pl.TempTimeout))
			}
			if err != nil {
				return instFail(b, drivers.RoleThermometer, "thermometer", fmt.Sprintf("wait for %.3f K ± %g K", k, pl.TempToleranceK), err)
			}
			return nil
		})
	}
	err := g.Wait()
	if err == nil {
		last.Merge(t)
	} else {
		*last = sweep.Target{}
	}
	return err
}

func same(a, b *float64) bool { return a != nil && b != nil && *a == *b }

// acquire measures point seq: set, settle, read the power meter, gate.
func (e *Engine) acquire(ctx context.Context, r *run, seq uint64, last *sweep.Target) (*glissv1.Point, error) {
	// The point's parts that live exactly as long as it does, in one
	// allocation: the axis indices and values, the settings, the records
	// and values the point refers to.
	parts := new(pointParts)
	idx, values, t := r.sweep.AtInto(seq, parts.index[:], parts.values[:])
	// Interlock: checked again before every command.
	if err := r.sweep.Check(t); err != nil {
		return nil, err
	}
	// The point is finished even when the daemon is asked to stop; the
	// watchdog bounds its time.
	started := e.opts.Now()
	pctx := r.wd.begin(started.Add(e.opts.PointTimeout + r.sweep.Gate + r.sweep.Settle + e.tempBudget(r.sweep, t)))
	defer r.wd.end()
	p, err := e.measure(pctx, r, parts, seq, idx, values, t, started, last)
	if err != nil && pctx.Err() != nil {
		return nil, fmt.Errorf("%w (%v)", err, r.wd.cause(pctx))
	}
	return p, err
}

// measure is acquire's work within the point's context.
func (e *Engine) measure(pctx context.Context, r *run, parts *pointParts, seq uint64, idx []uint32, values []float64, t sweep.Target, started time.Time, last *sweep.Target) (*glissv1.Point, error) {
	if err := e.command(pctx, r.sweep, t, last); err != nil {
		return nil, err
	}
	if r.sweep.Settle > 0 {
		if err := sleep(pctx, e.bench.Scale(r.sweep.Settle)); err != nil {
			return nil, err
		}
	}
	p := &parts.point
	*p = glissv1.Point{
		ScanId: r.rec.Id, Seq: seq, Index: idx, Values: values,
		GateMs:    float64(r.sweep.Gate) / float64(time.Millisecond),
		StartedAt: parts.stamp(0, started),
		Commanded: &parts.commanded,
	}
	parts.commanded = glissv1.Commanded{
		StageMm: last.StageMM, GddPs2: last.GDDPS2, AngleDeg: last.AngleDeg,
		PowerUw: last.PowerUW, DetuningMev: last.DetuningMeV, TemperatureK: last.TemperatureK,
	}
	if pm := e.bench.PowerMeter(); pm != nil {
		uw, err := pm.PowerUW(pctx)
		if err != nil {
			return nil, instFail(e.bench, drivers.RolePowerMeter, "power meter", "read", err)
		}
		if math.IsNaN(uw) || math.IsInf(uw, 0) {
			return nil, fmt.Errorf("power meter %q: reading %v is not a number", e.bench.ByRole(drivers.RolePowerMeter).Name, uw)
		}
		parts.powerUW = uw
		p.MeasuredPowerUw = &parts.powerUW
	}
	if th := e.bench.Thermometer(); th != nil {
		k, err := th.TemperatureK(pctx)
		if err != nil {
			return nil, instFail(e.bench, drivers.RoleThermometer, "thermometer", "read", err)
		}
		parts.temperatureK = k
		p.TemperatureK = &parts.temperatureK
	}
	c := e.bench.Counter()
	var counts []uint64
	var err error
	if ci, ok := c.(drivers.CounterInto); ok {
		counts, err = ci.CountInto(pctx, r.sweep.Gate, parts.counts[:0])
	} else {
		counts, err = c.Count(pctx, r.sweep.Gate)
	}
	if err != nil {
		return nil, instFail(e.bench, drivers.RoleCounter, "counter", fmt.Sprintf("gate %v", r.sweep.Gate), err)
	}
	if want := len(r.rec.Channels); len(counts) != want {
		return nil, fmt.Errorf("counter %q: %d channels returned, %d expected", e.bench.ByRole(drivers.RoleCounter).Name, len(counts), want)
	}
	p.Counts = counts
	p.FinishedAt = parts.stamp(1, e.opts.Now())
	return p, nil
}

// pointParts is a point with the messages and values it points to.
type pointParts struct {
	index                 [sweep.MaxAxes]uint32
	values                [sweep.AtBufFloats]float64
	point                 glissv1.Point
	commanded             glissv1.Commanded
	stamps                [2]timestamppb.Timestamp
	powerUW, temperatureK float64
	counts                [2]uint64 // x and xx; a counter with more channels allocates
}

// stamp sets stamps[i] to t (as timestamppb.New does) and returns it.
func (pp *pointParts) stamp(i int, t time.Time) *timestamppb.Timestamp {
	ts := &pp.stamps[i]
	ts.Seconds, ts.Nanos = t.Unix(), int32(t.Nanosecond())
	return ts
}

// countCeilings are the counter's count-rate ceilings (Hz) in the order of
// the scan's channels (recorded at submit), 0 where a channel has none;
// nil when none has one. Looked up once a run, not once a point.
func (e *Engine) countCeilings(r *run) []float64 {
	ce := e.bench.ByRole(drivers.RoleCounter)
	if ce == nil || len(ce.Limits.CountRateMaxHz) == 0 {
		return nil
	}
	out := make([]float64, len(r.rec.Channels))
	for i, ch := range r.rec.Channels {
		if c := ce.Limits.CountRateMaxHz[ch]; c > 0 {
			out[i] = c
		}
	}
	return out
}

// interlockAfter checks a measured point against the count-rate ceilings
// (countCeilings) and the maximum power. On a violation it sets the
// attenuator to its minimum at once and returns the pause reason. Software
// limits only: never a substitute for the hardware interlocks of the lab.
func (e *Engine) interlockAfter(ctx context.Context, r *run, p *glissv1.Point, ceilings []float64) string {
	var reason string
	gateS := p.GateMs / 1000
	for i, ceil := range ceilings {
		if ceil > 0 && i < len(p.Counts) {
			if rate := float64(p.Counts[i]) / gateS; rate > ceil {
				reason = fmt.Sprintf("interlock: count rate %.4g /s on channel %s above its ceiling %.4g /s at point %d", rate, r.rec.Channels[i], ceil, p.Seq)
				break
			}
		}
	}
	if reason == "" && p.MeasuredPowerUw != nil {
		if ae := e.bench.ByRole(drivers.RoleAttenuator); ae != nil && ae.Limits.PowerMaxUW > 0 && *p.MeasuredPowerUw > ae.Limits.PowerMaxUW {
			reason = fmt.Sprintf("interlock: measured power %.4g µW above the maximum %g µW at point %d", *p.MeasuredPowerUw, ae.Limits.PowerMaxUW, p.Seq)
		}
	}
	if reason == "" {
		return ""
	}
	e.log.Warn("interlock tripped", "scan", r.rec.Id, "reason", reason)
	if a := e.bench.Attenuator(); a != nil {
		deg := minPowerAngleDeg(e.bench.CurrentCalibration(), e.bench.ByRole(drivers.RoleAttenuator).Limits)
		actx, cancel := context.WithTimeout(context.WithoutCancel(ctx), e.opts.PointTimeout)
		err := a.SetAngleDeg(actx, deg)
		cancel()
		if err != nil {
			reason += fmt.Sprintf("; setting the attenuator to its minimum (%.3f°) failed: %v", deg, err)
		} else {
			reason += fmt.Sprintf("; attenuator set to its minimum (%.3f°)", deg)
		}
	}
	e.logf(r, "error", "%s", reason)
	return reason
}

// minPowerAngleDeg is the attenuator angle of least power, through the
// calibration, within the attenuator's angle limits: an extinction angle
// θ0 + 45° + k·90° inside them, else the limit of lower power.
func minPowerAngleDeg(c drivers.Calibration, l drivers.Limits) float64 {
	law := c.AttenuatorLaw()
	lo, hi := l.AngleMinDeg, l.AngleMaxDeg
	if law.Malus != nil {
		m := *law.Malus
		if !(hi > lo) { // no limits configured
			return m.Theta0Deg + 45
		}
		k := math.Ceil((lo - m.Theta0Deg - 45) / 90)
		if deg := m.Theta0Deg + 45 + 90*k; deg >= lo && deg <= hi {
			return deg
		}
		if m.PowerUW(lo) <= m.PowerUW(hi) {
			return lo
		}
		return hi
	}
	// Any other law (ND wheel): the least power over the allowed angles.
	if !(hi > lo) {
		lo, hi = 0, 360
	}
	best, bestP := lo, math.Inf(1)
	const n = 720
	for i := 0; i <= n; i++ {
		deg := lo + (hi-lo)*float64(i)/n
		if p, err := c.PowerUW(deg); err == nil && p < bestP {
			best, bestP = deg, p
		}
	}
	return best
}

func sleep(ctx context.Context, d time.Duration) error {
	return drivers.Wait(ctx, d)
}

// Snapshot returns a copy of a live scan's record, or nil.
func (e *Engine) snapshot(id string) (*glissv1.Scan, uint64, bool) {
	e.mu.Lock()
	r := e.runs[id]
	e.mu.Unlock()
	if r == nil {
		return nil, 0, false
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	return proto.Clone(r.rec).(*glissv1.Scan), r.version, true
}
