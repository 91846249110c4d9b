package bench

import (
	"context"
	"errors"
	"sync/atomic"
	"testing"
	"time"
)

// With a frozen clock moved by hand, the position read during a move is the
// trapezoidal profile's, exactly, and a cancelled move stops at the
// position of the moment of cancellation.
func TestInFlightPositionFollowsProfile(t *testing.T) {
	b := newBench(t, Options{Seed: 2, Speed: 1})
	stg := b.Stage().(*Stage)
	st := stg.st
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	var offset atomic.Int64
	st.now = func() time.Time { return t0.Add(time.Duration(offset.Load())) }

	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	errc := make(chan error, 1)
	go func() { errc <- stg.MoveToMM(ctx, 1200) }() // 24.5 s of (frozen) time
	deadline := time.Now().Add(5 * time.Second)
	for {
		st.mu.Lock()
		moving := st.stage.mv != nil
		st.mu.Unlock()
		if moving {
			break
		}
		if time.Now().After(deadline) {
			t.Fatal("move did not start")
		}
		time.Sleep(time.Millisecond)
	}
	bg := context.Background()
	for _, c := range []struct {
		at   time.Duration
		want float64
	}{
		{0, 600},
		{500 * time.Millisecond, 606.25}, // a·t²/2 = 50·0.25/2
		{10 * time.Second, 843.75},       // 6.25 + 25·9.5 mm past 600
	} {
		offset.Store(int64(c.at))
		if p, _ := stg.PositionMM(bg); p != c.want {
			t.Errorf("at %v into the move: %g mm, want %g", c.at, p, c.want)
		}
		if sn := st.snap(); sn.stageMM != c.want {
			t.Errorf("at %v: the counter's gate-start snapshot sees %g mm, want %g", c.at, sn.stageMM, c.want)
		}
	}
	cancel()
	if err := <-errc; !errors.Is(err, context.Canceled) {
		t.Fatalf("cancelled move: %v", err)
	}
	if p, _ := stg.PositionMM(bg); p != 843.75 {
		t.Errorf("stopped at %g, want 843.75 (where it was when cancelled)", p)
	}
}
