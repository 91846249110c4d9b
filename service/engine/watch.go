package engine

import (
	"context"
	"errors"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

// Watchers. Each watcher runs in its own goroutine (the gRPC stream's) and
// keeps its own cursor; the engine only wakes it (a non-blocking send on a
// channel of capacity one). A watcher that falls behind never slows the
// scan: it catches up from the recent-points ring or, beyond it, from the
// store, by sequence number. Points reach watchers only after the store's
// durability callback, so a watcher never sees a point that a crash could
// lose.

func (e *Engine) subscribe(id string) chan struct{} {
	ch := make(chan struct{}, 1)
	e.mu.Lock()
	m := e.subs[id]
	if m == nil {
		m = map[chan struct{}]struct{}{}
		e.subs[id] = m
	}
	m[ch] = struct{}{}
	e.mu.Unlock()
	return ch
}

func (e *Engine) unsubscribe(id string, ch chan struct{}) {
	e.mu.Lock()
	if m := e.subs[id]; m != nil {
		delete(m, ch)
		if len(m) == 0 {
			delete(e.subs, id)
		}
	}
	e.mu.Unlock()
}

func (e *Engine) notify(id string) {
	e.mu.Lock()
	for ch := range e.subs[id] {
		select {
		case ch <- struct{}{}:
		default:
		}
	}
	e.mu.Unlock()
}

// Watch streams the events of scan id to send: first the current record,
// then every stored point from from on, then live points, state changes and
// log lines, until the scan has ended and every point was sent, or ctx ends.
func (e *Engine) Watch(ctx context.Context, id string, from uint64, send func(*glissv1.ScanEvent) error) error {
	wake := e.subscribe(id)
	defer e.unsubscribe(id, wake)
	poll := time.NewTicker(250 * time.Millisecond)
	defer poll.Stop()

	rec, err := e.Get(id)
	if err != nil {
		return err
	}
	if err := send(&glissv1.ScanEvent{Event: &glissv1.ScanEvent_Scan{Scan: rec}}); err != nil {
		return err
	}
	cursor := from
	sentTransitions := len(rec.Transitions)
	sentState := rec.State
	logCursor := -1 // set on the first live look
	var cur *glissv1.Scan
	var ok, looked bool
	var seen uint64
	for {
		// Points: from the live ring when it has them, else from the store.
		for {
			pts, durable, live := e.recentFrom(id, cursor)
			for _, p := range pts {
				if err := send(&glissv1.ScanEvent{Event: &glissv1.ScanEvent_Point{Point: p}}); err != nil {
					return err
				}
				cursor = p.Seq + 1
			}
			if len(pts) > 0 {
				continue
			}
			if !live {
				durable, err = e.store.PointCount(id)
				if err != nil {
					return err
				}
			}
			if cursor >= durable {
				break
			}
			// Behind the ring: catch up from the store, up to what is durable.
			err := e.store.ReadPoints(ctx, id, cursor, func(p *glissv1.Point) error {
				if p.Seq >= durable {
					return errCaughtUp
				}
				if err := send(&glissv1.ScanEvent{Event: &glissv1.ScanEvent_Point{Point: p}}); err != nil {
					return err
				}
				cursor = p.Seq + 1
				return nil
			})
			if err != nil && !errors.Is(err, errCaughtUp) {
				return err
			}
		}
		// Log lines and the record: looked at only when they changed since
		// the last look (every change and log line counts in run.changes,
		// before the watchers are woken).
		if ch, live := e.changesOf(id); !live || !looked || ch != seen {
			seen, looked = ch, true
			logs, next := e.logsFrom(id, logCursor)
			logCursor = next
			for _, l := range logs {
				if err := send(&glissv1.ScanEvent{Event: &glissv1.ScanEvent_Log{Log: l}}); err != nil {
					return err
				}
			}
			cur, ok, _ = e.snapshotOrStored(id)
		}
		// State: send the record when it changed.
		if ok && (len(cur.Transitions) != sentTransitions || cur.State != sentState) {
			// The record is sent after the points it counts.
			if cur.PointsStored > cursor {
				continue
			}
			if err := send(&glissv1.ScanEvent{Event: &glissv1.ScanEvent_Scan{Scan: cur}}); err != nil {
				return err
			}
			sentTransitions, sentState = len(cur.Transitions), cur.State
		}
		if ok && isTerminal(cur.State) && cursor >= cur.PointsStored {
			return nil
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-wake:
		case <-poll.C:
			// Scans this engine does not run (replays on their own
			// simulated bench) write to the same store but wake nobody
			// here: look at the store now and then.
		}
	}
}

var errCaughtUp = errors.New("caught up")

// changesOf returns a live scan's change count (false: not live).
func (e *Engine) changesOf(id string) (uint64, bool) {
	e.mu.Lock()
	r := e.runs[id]
	e.mu.Unlock()
	if r == nil {
		return 0, false
	}
	return r.changes.Load(), true
}

// recentFrom returns the ring's points from seq on, the durable count, and
// whether the scan is live. Points before the ring are not returned.
func (e *Engine) recentFrom(id string, seq uint64) ([]*glissv1.Point, uint64, bool) {
	e.mu.Lock()
	r := e.runs[id]
	e.mu.Unlock()
	if r == nil {
		return nil, 0, false
	}
	r.pmu.Lock()
	defer r.pmu.Unlock()
	if len(r.recent) == 0 || seq < r.recent[0].Seq || seq > r.recent[len(r.recent)-1].Seq {
		return nil, r.durable, true
	}
	i := int(seq - r.recent[0].Seq)
	if i < 0 || i >= len(r.recent) || r.recent[i].Seq != seq {
		return nil, r.durable, true
	}
	out := make([]*glissv1.Point, len(r.recent)-i)
	copy(out, r.recent[i:])
	return out, r.durable, true
}

// logsFrom returns log lines after cursor (-1: none, start from now).
func (e *Engine) logsFrom(id string, cursor int) ([]*glissv1.LogLine, int) {
	e.mu.Lock()
	r := e.runs[id]
	e.mu.Unlock()
	if r == nil {
		return nil, cursor
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	n := len(r.logs)
	if cursor < 0 || cursor > n {
		return nil, n
	}
	out := append([]*glissv1.LogLine(nil), r.logs[cursor:]...)
	return out, n
}

func (e *Engine) snapshotOrStored(id string) (*glissv1.Scan, bool, error) {
	if rec, _, ok := e.snapshot(id); ok {
		rec.PointsStored = e.durableOrStoredID(id, rec.PointsStored)
		return rec, true, nil
	}
	rec, err := e.Get(id)
	if err != nil {
		return nil, false, err
	}
	return rec, true, nil
}

func (e *Engine) durableOrStoredID(id string, def uint64) uint64 {
	e.mu.Lock()
	r := e.runs[id]
	e.mu.Unlock()
	if r == nil {
		return def
	}
	return e.durableOrStored(r)
}

// ReadPoints streams stored points of scan id from seq from, at most limit
// (0: all).
func (e *Engine) ReadPoints(ctx context.Context, id string, from, limit uint64, fn func(*glissv1.Point) error) error {
	if _, err := e.Get(id); err != nil {
		return err
	}
	var n uint64
	err := e.store.ReadPoints(ctx, id, from, func(p *glissv1.Point) error {
		if limit > 0 && n >= limit {
			return errCaughtUp
		}
		n++
		return fn(p)
	})
	if errors.Is(err, errCaughtUp) {
		return nil
	}
	return err
}
