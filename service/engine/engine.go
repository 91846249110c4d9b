// Package engine runs scans on a bench: it owns the queue, the state of
// every live scan and the bench itself (one scan, or one manual command, at
// a time). Each point is stored before anyone hears of it: watchers are
// woken only from the store's durability callback.
package engine

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"log/slog"
	"sync"
	"sync/atomic"
	"time"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/service/store"
	"github.com/gliss-lab/gliss/service/sweep"
)

// Store is what the engine needs of the scan store.
type Store interface {
	CreateScan(ctx context.Context, sc *glissv1.Scan) error
	PutScan(ctx context.Context, sc *glissv1.Scan) error
	GetScan(id string) (*glissv1.Scan, error)
	ListScans(f store.ListFilter) ([]*glissv1.Scan, string, error)
	AppendPoint(ctx context.Context, p *glissv1.Point, done store.Done) error
	Sync(ctx context.Context) error
	PointCount(id string) (uint64, error)
	ReadPoints(ctx context.Context, id string, from uint64, fn func(*glissv1.Point) error) error
}

// Errors the engine returns; the gRPC layer maps them to status codes.
var (
	// ErrNotFound: no scan with that id.
	ErrNotFound = errors.New("no such scan")
	// ErrState: the scan is not in a state that allows the request.
	ErrState = errors.New("not allowed in the scan's state")
)

// BusyError is returned for a manual command while a scan holds the bench.
type BusyError struct{ ScanID string }

func (e *BusyError) Error() string {
	return fmt.Sprintf("the bench is held by scan %s: pause or cancel it first, or wait until it ends", e.ScanID)
}

// Options configure an engine.
type Options struct {
	Logger *slog.Logger
	// PointTimeout bounds one point's instrument work beyond its planned
	// move, settle and gate times (0: 2 min).
	PointTimeout time.Duration
	// Now is the clock (tests); nil means time.Now.
	Now func() time.Time
}

// Engine runs scans on one bench.
type Engine struct {
	bench *drivers.Bench
	store Store
	log   *slog.Logger
	opts  Options

	mu     sync.Mutex
	runs   map[string]*run // live scans: queued, running, paused
	queue  []*run          // FIFO of queued scans
	holder string          // "" free, a scan id, or "manual"
	wake   chan struct{}   // the runner's wake-up (cap 1)
	subs   map[string]map[chan struct{}]struct{}

	calSource atomic.Pointer[func() *glissv1.CalibrationRecord]
}

// SetCalibrationSource sets where Submit takes the calibration record that
// every new scan records (the bench's current calibration set).
func (e *Engine) SetCalibrationSource(f func() *glissv1.CalibrationRecord) { e.calSource.Store(&f) }

// New makes an engine. Call Recover, then Run.
func New(b *drivers.Bench, st Store, o Options) *Engine {
	if o.Logger == nil {
		o.Logger = slog.Default()
	}
	if o.PointTimeout <= 0 {
		o.PointTimeout = 2 * time.Minute
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	return &Engine{
		bench: b, store: st, log: o.Logger, opts: o,
		runs: map[string]*run{}, wake: make(chan struct{}, 1),
		subs: map[string]map[chan struct{}]struct{}{},
	}
}

// Bench returns the engine's bench.
func (e *Engine) Bench() *drivers.Bench { return e.bench }

// run is a live scan. Its record is owned by the engine: the runner and the
// control methods change it under mu, and persist each change.
type run struct {
	mu      sync.Mutex
	rec     *glissv1.Scan
	sweep   *sweep.Sweep
	wd      *watchdog // bounds each point's time while the scan runs
	version uint64    // incremented on each record change
	// changes counts record changes and log lines, for watchers to skip
	// looking at an unchanged record (readable without mu).
	changes atomic.Uint64

	// state mirrors rec.State for readers that hold e.mu (lock order:
	// r.mu before e.mu, never the reverse).
	state atomic.Int32

	// pmu guards what the store's durability callback touches. It is never
	// held while calling the store: the callback runs on the store's writer.
	pmu      sync.Mutex
	durable  uint64 // points known durable
	recent   []*glissv1.Point
	writeErr error
	// notifyPending: a wake-up of the watchers for new durable points is
	// on its way.
	notifyPending atomic.Bool

	pauseReq, cancelReq string // reasons; "" when not requested
	pauseSet, cancelSet bool
	// attention: set (under mu, or pmu for a write error) whenever
	// pauseSet, cancelSet or writeErr is set, so that between needs no lock
	// on the usual point. It may stay set after they are cleared: between
	// then looks under the locks and clears it.
	attention atomic.Bool
	// autoResume: paused for an unavailable instrument, which the runner
	// probes; the scan resumes by itself when it answers. An operator's
	// pause clears it.
	autoResume bool
	resume     chan struct{} // closed-and-replaced on resume

	logs []*glissv1.LogLine
}

func newRun(rec *glissv1.Scan, p *sweep.Sweep, durable uint64) *run {
	r := &run{rec: rec, sweep: p, resume: make(chan struct{}), durable: durable}
	r.state.Store(int32(rec.State))
	return r
}

func (r *run) durableCount() uint64 {
	r.pmu.Lock()
	defer r.pmu.Unlock()
	return r.durable
}

// setDurable resets the durable count (from the store) and clears a write error.
func (r *run) setDurable(n uint64) {
	r.pmu.Lock()
	r.durable = n
	r.writeErr = nil
	r.pmu.Unlock()
}

// writeErrPending: a write error is waiting for takeWriteErr.
func (r *run) writeErrPending() bool {
	r.pmu.Lock()
	defer r.pmu.Unlock()
	return r.writeErr != nil
}

// takeWriteErr returns and clears the first write error since the last call.
func (r *run) takeWriteErr() error {
	r.pmu.Lock()
	defer r.pmu.Unlock()
	err := r.writeErr
	r.writeErr = nil
	return err
}

// recentCap bounds the ring of recent durable points that watchers read
// without going to the store (pointers to points already in memory).
const recentCap = 4096
const logCap = 256

func newID(now time.Time) string {
	var b [3]byte
	_, _ = rand.Read(b[:])
	return now.UTC().Format("20060102T150405.000Z") + "-" + hex.EncodeToString(b[:])
}

// Validate checks a spec against the bench and returns its plan and preview.
func (e *Engine) Validate(spec *glissv1.ScanSpec) (*sweep.Sweep, *glissv1.Preview, error) {
	p, err := sweep.New(spec, e.bench)
	if err != nil {
		return nil, nil, err
	}
	pv := p.Preview(e.currentTarget())
	if ts := e.bench.TimeScale; ts > 1 {
		// A simulated bench running faster than real time.
		pv.EstimatedDurationS /= ts
	}
	return p, pv, nil
}

// currentTarget reads where the instruments are now, for previews.
func (e *Engine) currentTarget() sweep.Target {
	ctx, cancel := context.WithTimeout(context.Background(), 500*time.Millisecond)
	defer cancel()
	var t sweep.Target
	if s := e.bench.Stage(); s != nil {
		if mm, err := s.PositionMM(ctx); err == nil {
			t.StageMM = &mm
		}
	}
	if a := e.bench.Attenuator(); a != nil {
		if d, err := a.AngleDeg(ctx); err == nil {
			t.AngleDeg = &d
		}
	}
	if l := e.bench.Laser(); l != nil {
		if d, err := l.DetuningMeV(ctx); err == nil {
			t.DetuningMeV = &d
		}
	}
	if th := e.bench.Thermometer(); th != nil {
		// the sample's temperature now, where its approach to a first
		// setpoint starts
		if k, err := th.TemperatureK(ctx); err == nil {
			t.TemperatureK = &k
		}
	}
	return t
}

// SubmitOptions are what a submission records beyond its spec.
type SubmitOptions struct {
	// ReplayOf is the id of the scan this one replays.
	ReplayOf string
	// Calibration is the calibration set the scan uses (recorded in it).
	Calibration *glissv1.CalibrationRecord
}

// Submit validates, stores and queues a scan. The error is *sweep.Invalid
// for a bad spec (nothing is stored then).
func (e *Engine) Submit(ctx context.Context, spec *glissv1.ScanSpec) (*glissv1.Scan, error) {
	return e.SubmitWith(ctx, spec, SubmitOptions{})
}

// SubmitWith is Submit with options.
func (e *Engine) SubmitWith(ctx context.Context, spec *glissv1.ScanSpec, o SubmitOptions) (*glissv1.Scan, error) {
	p, pv, err := e.Validate(spec)
	if err != nil {
		return nil, err
	}
	if o.Calibration == nil {
		if f := e.calSource.Load(); f != nil {
			o.Calibration = (*f)()
		}
	}
	now := e.opts.Now()
	rec := &glissv1.Scan{
		Id:          newID(now),
		Spec:        proto.Clone(spec).(*glissv1.ScanSpec),
		State:       glissv1.ScanState_SCAN_STATE_QUEUED,
		Preview:     pv,
		CreatedAt:   timestamppb.New(now),
		Bench:       e.bench.Name,
		SimSeed:     e.bench.SimSeed,
		ReplayOf:    o.ReplayOf,
		Calibration: o.Calibration,
		Reason:      "submitted",
		Transitions: []*glissv1.Transition{{
			From: glissv1.ScanState_SCAN_STATE_UNSPECIFIED, To: glissv1.ScanState_SCAN_STATE_QUEUED,
			At: timestamppb.New(now), Reason: "submitted",
		}},
	}
	if c := e.bench.Counter(); c != nil {
		rec.Channels = append([]string(nil), c.Channels()...)
	}
	if err := e.store.CreateScan(ctx, rec); err != nil {
		return nil, fmt.Errorf("store scan %s: %w", rec.Id, err)
	}
	out := proto.Clone(rec).(*glissv1.Scan) // before the runner can touch rec
	r := newRun(rec, p, 0)
	e.mu.Lock()
	e.runs[rec.Id] = r
	e.queue = append(e.queue, r)
	e.mu.Unlock()
	e.signal()
	e.log.Info("scan queued", "scan", rec.Id, "name", spec.GetName(), "points", p.Points, "estimated_s", pv.EstimatedDurationS)
	return out, nil
}

func (e *Engine) signal() {
	select {
	case e.wake <- struct{}{}:
	default:
	}
}

// Get returns a scan record with its stored point count.
func (e *Engine) Get(id string) (*glissv1.Scan, error) {
	sc, err := e.store.GetScan(id)
	if errors.Is(err, store.ErrNotFound) {
		return nil, fmt.Errorf("scan %q: %w", id, ErrNotFound)
	}
	return sc, err
}

// List lists scans, newest first.
func (e *Engine) List(f store.ListFilter) ([]*glissv1.Scan, string, error) {
	return e.store.ListScans(f)
}

// transition changes a run's state, records it, persists it and wakes
// watchers. Called with r.mu held.
func (e *Engine) transitionLocked(ctx context.Context, r *run, to glissv1.ScanState, reason string) error {
	now := e.opts.Now()
	from := r.rec.State
	r.rec.State = to
	r.rec.Reason = reason
	r.rec.Transitions = append(r.rec.Transitions, &glissv1.Transition{From: from, To: to, At: timestamppb.New(now), Reason: reason})
	switch to {
	case glissv1.ScanState_SCAN_STATE_RUNNING:
		if r.rec.StartedAt == nil {
			r.rec.StartedAt = timestamppb.New(now)
		}
	case glissv1.ScanState_SCAN_STATE_SUCCEEDED, glissv1.ScanState_SCAN_STATE_FAILED, glissv1.ScanState_SCAN_STATE_CANCELLED:
		r.rec.FinishedAt = timestamppb.New(now)
	}
	r.rec.PointsStored = r.durableCount()
	r.state.Store(int32(to))
	r.version++
	err := e.store.PutScan(context.WithoutCancel(ctx), r.rec)
	e.log.Info("scan state", "scan", r.rec.Id, "from", from.String(), "to", to.String(), "reason", reason)
	e.appendLogLocked(r, "info", fmt.Sprintf("%s → %s: %s", short(from), short(to), reason))
	go e.notify(r.rec.Id)
	if err != nil {
		return fmt.Errorf("scan %s: record state %s: %w", r.rec.Id, short(to), err)
	}
	return nil
}

func short(s glissv1.ScanState) string {
	n := s.String()
	const p = "SCAN_STATE_"
	if len(n) > len(p) {
		return n[len(p):]
	}
	return n
}

func (e *Engine) appendLogLocked(r *run, level, msg string) {
	defer r.changes.Add(1)
	r.logs = append(r.logs, &glissv1.LogLine{At: timestamppb.New(e.opts.Now()), Level: level, Message: msg})
	if len(r.logs) > logCap {
		r.logs = append(r.logs[:0:0], r.logs[len(r.logs)-logCap:]...)
	}
}

func (e *Engine) logf(r *run, level, format string, a ...any) {
	r.mu.Lock()
	e.appendLogLocked(r, level, fmt.Sprintf(format, a...))
	r.mu.Unlock()
	e.notify(r.rec.Id)
}

func isTerminal(s glissv1.ScanState) bool {
	switch s {
	case glissv1.ScanState_SCAN_STATE_SUCCEEDED, glissv1.ScanState_SCAN_STATE_FAILED, glissv1.ScanState_SCAN_STATE_CANCELLED:
		return true
	}
	return false
}

// Pause asks a queued or running scan to hold after the current point.
func (e *Engine) Pause(ctx context.Context, id, reason string) (*glissv1.Scan, error) {
	if reason == "" {
		reason = "pause requested"
	}
	r, err := e.live(id)
	if err != nil {
		return nil, err
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	switch r.rec.State {
	case glissv1.ScanState_SCAN_STATE_RUNNING:
		r.pauseSet, r.pauseReq = true, reason
		r.attention.Store(true)
	case glissv1.ScanState_SCAN_STATE_QUEUED:
		// A queued scan is paused in place: it keeps its place in the queue
		// but the runner skips it until it is resumed.
		if err := e.transitionLocked(ctx, r, glissv1.ScanState_SCAN_STATE_PAUSED, reason); err != nil {
			return nil, err
		}
	case glissv1.ScanState_SCAN_STATE_PAUSED:
		if r.autoResume {
			// The operator holds the scan: no automatic resume.
			r.autoResume = false
			r.rec.Reason += "; held by " + reason + ": no automatic resume"
			r.version++
			if err := e.store.PutScan(context.WithoutCancel(ctx), r.rec); err != nil {
				return nil, fmt.Errorf("scan %s: record hold: %w", id, err)
			}
			e.appendLogLocked(r, "info", "automatic resume off: "+reason)
			go e.notify(id)
		}
	default:
		return nil, fmt.Errorf("scan %s is %s: only QUEUED or RUNNING scans can be paused: %w", id, short(r.rec.State), ErrState)
	}
	return proto.Clone(r.rec).(*glissv1.Scan), nil
}

// Resume continues a PAUSED scan, or requeues an INTERRUPTED one from its
// first point not stored.
func (e *Engine) Resume(ctx context.Context, id string) (*glissv1.Scan, error) {
	e.mu.Lock()
	r := e.runs[id]
	e.mu.Unlock()
	if r == nil {
		return e.requeueStored(ctx, id, "resume requested")
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	switch r.rec.State {
	case glissv1.ScanState_SCAN_STATE_PAUSED:
		r.pauseSet, r.pauseReq = false, ""
		e.mu.Lock()
		running := e.holder == id
		e.mu.Unlock()
		if running {
			close(r.resume)
			r.resume = make(chan struct{})
		} else {
			if err := e.transitionLocked(ctx, r, glissv1.ScanState_SCAN_STATE_QUEUED, "resume requested"); err != nil {
				return nil, err
			}
			e.signal()
		}
	case glissv1.ScanState_SCAN_STATE_RUNNING:
		if r.pauseSet { // a pause not yet taken effect: withdraw it
			r.pauseSet, r.pauseReq = false, ""
		}
	default:
		return nil, fmt.Errorf("scan %s is %s: only PAUSED or INTERRUPTED scans can be resumed: %w", id, short(r.rec.State), ErrState)
	}
	return proto.Clone(r.rec).(*glissv1.Scan), nil
}

// requeueStored brings an INTERRUPTED scan from the store back to the queue.
func (e *Engine) requeueStored(ctx context.Context, id, reason string) (*glissv1.Scan, error) {
	rec, err := e.Get(id)
	if err != nil {
		return nil, err
	}
	if rec.State != glissv1.ScanState_SCAN_STATE_INTERRUPTED {
		return nil, fmt.Errorf("scan %s is %s: only PAUSED or INTERRUPTED scans can be resumed: %w", id, short(rec.State), ErrState)
	}
	if rec.ReplayOf != "" {
		// A replay runs on a simulated bench of its own, never on this one.
		return nil, fmt.Errorf("scan %s is a replay of %s and cannot be resumed on the bench %q: replay %s again (gliss scan replay %s): %w", id, rec.ReplayOf, e.bench.Name, rec.ReplayOf, rec.ReplayOf, ErrState)
	}
	p, err := sweep.New(rec.Spec, e.bench)
	if err != nil {
		return nil, fmt.Errorf("scan %s no longer fits the bench %q: %v: %w", id, e.bench.Name, err, ErrState)
	}
	r := newRun(rec, p, rec.PointsStored)
	r.mu.Lock()
	err = e.transitionLocked(ctx, r, glissv1.ScanState_SCAN_STATE_QUEUED, reason)
	out := proto.Clone(r.rec).(*glissv1.Scan)
	r.mu.Unlock()
	if err != nil {
		return nil, err
	}
	e.mu.Lock()
	if e.runs[id] != nil {
		e.mu.Unlock()
		return nil, fmt.Errorf("scan %s is already live: %w", id, ErrState)
	}
	e.runs[id] = r
	e.queue = append(e.queue, r)
	e.mu.Unlock()
	e.signal()
	return out, nil
}

// Cancel stops a scan after the current point; stored points are kept.
func (e *Engine) Cancel(ctx context.Context, id, reason string) (*glissv1.Scan, error) {
	if reason == "" {
		reason = "cancel requested"
	}
	e.mu.Lock()
	r := e.runs[id]
	e.mu.Unlock()
	if r == nil {
		rec, err := e.Get(id)
		if err != nil {
			return nil, err
		}
		if rec.State != glissv1.ScanState_SCAN_STATE_INTERRUPTED {
			return nil, fmt.Errorf("scan %s is %s and cannot be cancelled: %w", id, short(rec.State), ErrState)
		}
		r = newRun(rec, nil, rec.PointsStored)
		r.mu.Lock()
		defer r.mu.Unlock()
		if err := e.transitionLocked(ctx, r, glissv1.ScanState_SCAN_STATE_CANCELLED, reason); err != nil {
			return nil, err
		}
		return proto.Clone(r.rec).(*glissv1.Scan), nil
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	e.mu.Lock()
	running := e.holder == id
	e.mu.Unlock()
	switch {
	case isTerminal(r.rec.State):
		return nil, fmt.Errorf("scan %s has already ended (%s): %w", id, short(r.rec.State), ErrState)
	case running:
		r.cancelSet, r.cancelReq = true, reason
		r.attention.Store(true)
		close(r.resume) // wake a paused runner
		r.resume = make(chan struct{})
	default: // queued or paused in the queue
		if err := e.transitionLocked(ctx, r, glissv1.ScanState_SCAN_STATE_CANCELLED, reason); err != nil {
			return nil, err
		}
		e.mu.Lock()
		e.dropLocked(id)
		e.mu.Unlock()
	}
	return proto.Clone(r.rec).(*glissv1.Scan), nil
}

func (e *Engine) dropLocked(id string) {
	delete(e.runs, id)
	for i, q := range e.queue {
		if q.rec.Id == id {
			e.queue = append(e.queue[:i], e.queue[i+1:]...)
			break
		}
	}
}

func (e *Engine) live(id string) (*run, error) {
	e.mu.Lock()
	r := e.runs[id]
	e.mu.Unlock()
	if r != nil {
		return r, nil
	}
	rec, err := e.Get(id)
	if err != nil {
		return nil, err
	}
	return nil, fmt.Errorf("scan %s is %s: %w", id, short(rec.State), ErrState)
}

// Manual runs fn with the bench held for a manual command. It fails with
// *BusyError while a scan holds the bench.
func (e *Engine) Manual(ctx context.Context, fn func(ctx context.Context, b *drivers.Bench) error) error {
	e.mu.Lock()
	switch e.holder {
	case "":
		e.holder = "manual"
	case "manual":
		e.mu.Unlock()
		return &BusyError{ScanID: "(another manual command)"}
	default:
		h := e.holder
		// A scan whose end is already recorded (and announced to its
		// watchers) no longer touches the instruments; its runner is only
		// letting go of the bench. Take it over rather than refuse.
		if r := e.runs[h]; r == nil || !doneWithBench(glissv1.ScanState(r.state.Load())) {
			e.mu.Unlock()
			return &BusyError{ScanID: h}
		}
		e.holder = "manual"
	}
	e.mu.Unlock()
	defer func() {
		e.mu.Lock()
		e.holder = ""
		e.mu.Unlock()
		e.signal()
	}()
	return fn(ctx, e.bench)
}

// doneWithBench reports whether a scan in state s has finished with the
// instruments for good (or until a resume requeues it).
func doneWithBench(s glissv1.ScanState) bool {
	return isTerminal(s) || s == glissv1.ScanState_SCAN_STATE_INTERRUPTED
}

// Holder returns the id of the scan holding the bench ("" when free).
func (e *Engine) Holder() string {
	e.mu.Lock()
	defer e.mu.Unlock()
	if e.holder == "manual" {
		return ""
	}
	return e.holder
}

// Recover is called once at start: a scan the store says was RUNNING or
// PAUSED (the daemon died or stopped under it) becomes INTERRUPTED with the
// reason; QUEUED scans are queued again in their order. With autoResume,
// INTERRUPTED scans are queued again too and continue from their first
// point not stored.
func (e *Engine) Recover(ctx context.Context, autoResume bool) error {
	var all []*glissv1.Scan
	token := ""
	for {
		page, next, err := e.store.ListScans(store.ListFilter{PageSize: 1000, PageToken: token, States: []glissv1.ScanState{
			glissv1.ScanState_SCAN_STATE_QUEUED, glissv1.ScanState_SCAN_STATE_RUNNING,
			glissv1.ScanState_SCAN_STATE_PAUSED, glissv1.ScanState_SCAN_STATE_INTERRUPTED,
		}})
		if err != nil {
			return fmt.Errorf("recover: list scans: %w", err)
		}
		all = append(all, page...)
		if next == "" {
			break
		}
		token = next
	}
	// Oldest first, so that the queue keeps its order.
	for i, j := 0, len(all)-1; i < j; i, j = i+1, j-1 {
		all[i], all[j] = all[j], all[i]
	}
	for _, rec := range all {
		r := newRun(rec, nil, rec.PointsStored)
		r.mu.Lock()
		if rec.State == glissv1.ScanState_SCAN_STATE_RUNNING || rec.State == glissv1.ScanState_SCAN_STATE_PAUSED {
			reason := fmt.Sprintf("glissd stopped while the scan was %s, after %d of %d points", short(rec.State), rec.PointsStored, rec.GetPreview().GetPoints())
			if err := e.transitionLocked(ctx, r, glissv1.ScanState_SCAN_STATE_INTERRUPTED, reason); err != nil {
				r.mu.Unlock()
				return err
			}
		}
		state := r.rec.State
		r.mu.Unlock()
		if state == glissv1.ScanState_SCAN_STATE_INTERRUPTED {
			if autoResume {
				if _, err := e.requeueStored(ctx, rec.Id, "resumed automatically at start (--auto-resume)"); err != nil {
					e.log.Warn("auto-resume failed", "scan", rec.Id, "err", err)
				}
			}
			continue
		}
		p, err := sweep.New(rec.Spec, e.bench)
		if err != nil {
			r.mu.Lock()
			_ = e.transitionLocked(ctx, r, glissv1.ScanState_SCAN_STATE_FAILED, fmt.Sprintf("no longer fits the bench: %v", err))
			r.mu.Unlock()
			continue
		}
		r.sweep = p
		e.mu.Lock()
		e.runs[rec.Id] = r
		e.queue = append(e.queue, r)
		e.mu.Unlock()
	}
	e.signal()
	return nil
}
