package engine

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"
)

// TestWatchdog: a point past its deadline has its context cancelled with a
// cause that says so; the next point gets a fresh context; a disarmed point
// is never cancelled.
func TestWatchdog(t *testing.T) {
	parent, stop := context.WithCancel(context.Background())
	w := newWatchdog(parent)
	defer w.close()
	stop() // the daemon stopping does not cut a point short

	ctx := w.begin(time.Now().Add(150 * time.Millisecond))
	select {
	case <-ctx.Done():
	case <-time.After(2 * time.Second):
		t.Fatal("a point past its deadline was not cancelled within 2 s")
	}
	cause := w.cause(ctx)
	if !errors.Is(cause, context.DeadlineExceeded) || !strings.Contains(cause.Error(), "time budget") {
		t.Errorf("cause %v", cause)
	}
	w.end()

	next := w.begin(time.Now().Add(time.Hour))
	if next.Err() != nil {
		t.Fatalf("the next point's context is already done: %v", next.Err())
	}
	w.end()
	// Disarmed: an expired deadline no longer matters once end was called.
	c := w.begin(time.Now().Add(-time.Second))
	w.end()
	time.Sleep(3 * watchdogTick)
	if c.Err() != nil {
		t.Errorf("a disarmed point was cancelled: %v", context.Cause(c))
	}
}
