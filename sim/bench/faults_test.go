package bench

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/gliss-lab/gliss/drivers"
)

func TestFaultTimeout(t *testing.T) {
	b := newBench(t, Options{Seed: 1, Speed: 100})
	ctx := context.Background()
	if err := InjectFault(b, NameCounter, Fault{Kind: FaultTimeout, Delay: 2 * time.Second, Calls: 1}); err != nil {
		t.Fatal(err)
	}
	start := time.Now()
	_, err := b.Counter().Count(ctx, 10*time.Millisecond)
	el := time.Since(start)
	if !errors.Is(err, drivers.ErrUnavailable) {
		t.Fatalf("Count under a timeout fault: %v, want ErrUnavailable", err)
	}
	if el < 20*time.Millisecond-time.Millisecond { // 2 s / Speed 100
		t.Errorf("timeout returned after %v, before its 20 ms delay", el)
	}
	// Calls: 1 — the fault has cleared.
	if _, err := b.Counter().Count(ctx, 10*time.Millisecond); err != nil {
		t.Errorf("Count after the fault cleared: %v", err)
	}
	// A timeout on a move leaves the stage where it was, and honours ctx.
	if err := InjectFault(b, NameStage, Fault{Kind: FaultTimeout, Delay: time.Hour}); err != nil {
		t.Fatal(err)
	}
	cctx, cancel := context.WithTimeout(ctx, 50*time.Millisecond)
	defer cancel()
	if err := b.Stage().MoveToMM(cctx, 700); !errors.Is(err, context.DeadlineExceeded) {
		t.Errorf("move under an hour-long timeout with a 50 ms context: %v", err)
	}
	if err := ClearFault(b, NameStage); err != nil {
		t.Fatal(err)
	}
	if p, _ := b.Stage().PositionMM(ctx); p != stageStartMM {
		t.Errorf("stage moved to %g under a timeout", p)
	}
}

func TestFaultErrorReply(t *testing.T) {
	b := newBench(t, Options{Seed: 1, Instant: true})
	ctx := context.Background()
	if err := InjectFault(b, NamePowerMeter, Fault{Kind: FaultError, Reply: "E12 sensor overload", Calls: 2}); err != nil {
		t.Fatal(err)
	}
	for i := range 2 {
		_, err := b.PowerMeter().PowerUW(ctx)
		if !errors.Is(err, ErrReply) || !strings.Contains(err.Error(), "E12 sensor overload") {
			t.Errorf("reading %d: %v, want the error reply", i, err)
		}
	}
	if _, err := b.PowerMeter().PowerUW(ctx); err != nil {
		t.Errorf("after 2 calls the fault should clear: %v", err)
	}
	// Persistent until cleared.
	if err := InjectFault(b, NameLaser, Fault{Kind: FaultError}); err != nil {
		t.Fatal(err)
	}
	for range 3 {
		if err := b.Laser().SetDetuningMeV(ctx, 1); !errors.Is(err, ErrReply) {
			t.Fatalf("tune under an error fault: %v", err)
		}
	}
	if _, err := b.Laser().(drivers.Identifier).Identify(ctx); !errors.Is(err, ErrReply) {
		t.Errorf("identify under an error fault: %v", err)
	}
	ClearFault(b, NameLaser)
	if d, _ := b.Laser().DetuningMeV(ctx); d != 0 {
		t.Errorf("laser tuned to %g under an error fault", d)
	}
}

func TestFaultStuck(t *testing.T) {
	b := newBench(t, Options{Seed: 1, Instant: true})
	ctx := context.Background()
	if err := InjectFault(b, NameStage, Fault{Kind: FaultStuck, Calls: 1}); err != nil {
		t.Fatal(err)
	}
	// A query does not use up a stuck fault.
	if _, err := b.Stage().PositionMM(ctx); err != nil {
		t.Fatal(err)
	}
	err := b.Stage().MoveToMM(ctx, 1000)
	if !errors.Is(err, ErrStalled) {
		t.Fatalf("stuck move: %v, want ErrStalled", err)
	}
	p, _ := b.Stage().PositionMM(ctx)
	if math.Abs(p-800) > 0.01 { // halfway from 600 to 1000
		t.Errorf("stuck stage at %g, want about 800", p)
	}
	if err := b.Stage().MoveToMM(ctx, 1000); err != nil {
		t.Errorf("move after the stall cleared: %v", err)
	}
	if err := InjectFault(b, NameAttenuator, Fault{Kind: FaultStuck, StallFraction: 0.25, Calls: 1}); err != nil {
		t.Fatal(err)
	}
	if err := b.Attenuator().SetAngleDeg(ctx, 5); !errors.Is(err, ErrStalled) {
		t.Errorf("stuck rotation: %v", err)
	}
	if a, _ := b.Attenuator().AngleDeg(ctx); math.Abs(a-35) > 0.05 { // 45 → 5, a quarter of the way
		t.Errorf("stuck plate at %g°, want about 35", a)
	}
}

// A stuck scaled move spends the time of its partial travel, then fails.
func TestFaultStuckScaled(t *testing.T) {
	b := newBench(t, Options{Seed: 1, Speed: 100})
	if err := InjectFault(b, NameStage, Fault{Kind: FaultStuck}); err != nil {
		t.Fatal(err)
	}
	start := time.Now()
	err := b.Stage().MoveToMM(context.Background(), 0)
	el := time.Since(start)
	if !errors.Is(err, ErrStalled) {
		t.Fatal(err)
	}
	if want := MoveDurationMM(600, 300) / 100; el < want-time.Millisecond {
		t.Errorf("stuck move returned after %v, before the %v of its partial travel", el, want)
	}
}

func TestInjectFaultRejected(t *testing.T) {
	b := newBench(t, Options{Instant: true})
	for _, c := range []struct {
		inst string
		f    Fault
		want string
	}{
		{"nosuch", Fault{Kind: FaultError}, "no such instrument"},
		{NameCounter, Fault{Kind: FaultStuck}, "applies to a stage"},
		{NameStage, Fault{Kind: 0}, "unknown fault kind"},
		{NameStage, Fault{Kind: FaultStuck, StallFraction: 1}, "StallFraction"},
		{NameStage, Fault{Kind: FaultTimeout, Delay: -time.Second}, "Delay"},
	} {
		err := InjectFault(b, c.inst, c.f)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("InjectFault(%q, %+v): %v, want %q", c.inst, c.f, err, c.want)
		}
	}
	other := &drivers.Bench{Entries: []*drivers.Entry{{Name: "x", Driver: "lineproto", Inst: nopInst{}}}}
	if err := InjectFault(other, "x", Fault{Kind: FaultError}); err == nil {
		t.Error("fault injected into a non-simulated instrument")
	}
}

type nopInst struct{}

func (nopInst) Close() error { return nil }

func TestClosedInstrument(t *testing.T) {
	b, err := New(Options{Instant: true})
	if err != nil {
		t.Fatal(err)
	}
	if err := b.Close(); err != nil {
		t.Fatal(err)
	}
	if err := b.Close(); err != nil {
		t.Errorf("second Close: %v", err)
	}
	ctx := context.Background()
	if err := b.Stage().MoveToMM(ctx, 1); err == nil || !strings.Contains(err.Error(), "closed") {
		t.Errorf("move on a closed stage: %v", err)
	}
	if _, err := b.Counter().Count(ctx, time.Millisecond); err == nil {
		t.Error("count on a closed counter succeeded")
	}
}
