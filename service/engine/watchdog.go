package engine

import (
	"context"
	"fmt"
	"sync"
	"sync/atomic"
	"time"
)

// watchdog bounds the time of each point without a timer per point (a
// context.WithTimeout per point was a third of the engine's CPU at full
// speed). One goroutine per running scan looks at the current point's
// deadline a few times a second and cancels the points' shared context when
// it has passed; the next point then gets a fresh context.
type watchdog struct {
	parent   context.Context
	mu       sync.Mutex
	ctx      context.Context
	cancel   context.CancelCauseFunc
	deadline atomic.Int64 // unix ns of the current point's deadline; 0: none
	stop     chan struct{}
	done     chan struct{}
}

// watchdogTick is how often the deadline is looked at: the precision of a
// point timeout, which is minutes.
const watchdogTick = 100 * time.Millisecond

// newWatchdog starts a watchdog whose contexts ignore parent's cancellation
// (a point is finished even when the daemon is asked to stop).
func newWatchdog(parent context.Context) *watchdog {
	w := &watchdog{parent: context.WithoutCancel(parent), stop: make(chan struct{}), done: make(chan struct{})}
	w.ctx, w.cancel = context.WithCancelCause(w.parent)
	go w.run()
	return w
}

func (w *watchdog) run() {
	defer close(w.done)
	t := time.NewTicker(watchdogTick)
	defer t.Stop()
	for {
		select {
		case <-w.stop:
			return
		case now := <-t.C:
			if d := w.deadline.Load(); d != 0 && now.UnixNano() > d {
				w.mu.Lock()
				w.cancel(fmt.Errorf("point exceeded its time budget (deadline %s): %w", time.Unix(0, d).UTC().Format(time.RFC3339), context.DeadlineExceeded))
				w.mu.Unlock()
			}
		}
	}
}

// begin arms the deadline of a point and returns its context.
func (w *watchdog) begin(deadline time.Time) context.Context {
	w.mu.Lock()
	if w.ctx.Err() != nil {
		w.ctx, w.cancel = context.WithCancelCause(w.parent)
	}
	ctx := w.ctx
	w.mu.Unlock()
	w.deadline.Store(deadline.UnixNano())
	return ctx
}

// end disarms the deadline.
func (w *watchdog) end() { w.deadline.Store(0) }

// cause explains a cancelled point context.
func (w *watchdog) cause(ctx context.Context) error { return context.Cause(ctx) }

// close stops the watchdog.
func (w *watchdog) close() {
	close(w.stop)
	<-w.done
	w.mu.Lock()
	w.cancel(context.Canceled)
	w.mu.Unlock()
}
