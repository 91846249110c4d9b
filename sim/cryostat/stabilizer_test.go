package cryostat

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/gliss-lab/gliss/drivers"
)

// WaitStableK is the drivers.Stabilizer the scan engine calls after
// SetSetpointK: the same wait as WaitStable, at the setpoint it is given.
func TestWaitStableK(t *testing.T) {
	clk := newManual()
	c := open(t, Options{Seed: 5, Clock: clk})
	var st drivers.Stabilizer = c
	ctx := context.Background()
	if err := c.SetSetpointK(ctx, 8); err != nil {
		t.Fatal(err)
	}
	t0 := clk.Now()
	if err := st.WaitStableK(ctx, 8, 0.05, 30*time.Second, 20*time.Minute); err != nil {
		t.Fatal(err)
	}
	// τ·ln(3.8 K / 0.05 K) to enter the band (first-order step response,
	// Ogata, Modern Control Engineering, 5th ed., §5-2), then the 30 s hold.
	lo := time.Duration(60*math.Log(3.8/0.05)*float64(time.Second)) + 30*time.Second - 5*time.Second
	if el := clk.Now().Sub(t0); el < lo || el > lo+90*time.Second {
		t.Errorf("stable after %v, want about %v", el, lo)
	}

	// Waiting for a temperature the controller is not going to: the wait
	// gives up at the timeout and the reason names the setpoint waited for.
	t1 := clk.Now()
	err := st.WaitStableK(ctx, 12, 0.05, 10*time.Second, 5*time.Minute)
	var se *StabilityError
	if !errors.Is(err, ErrNotStable) || !errors.As(err, &se) {
		t.Fatalf("wait for 12 K at a setpoint of 8 K: %v, want a StabilityError", err)
	}
	if el := clk.Now().Sub(t1); el < 5*time.Minute || el > 5*time.Minute+2*time.Second {
		t.Errorf("gave up after %v of instrument time, want the timeout of 5m", el)
	}
	if se.SetpointK != 12 || !strings.Contains(err.Error(), "setpoint 12 K") {
		t.Errorf("reason %q does not name the setpoint 12 K", err)
	}
	if sp, _ := c.SetpointK(ctx); sp != 8 {
		t.Errorf("WaitStableK changed the setpoint to %g K", sp)
	}
	for _, bad := range []struct {
		sp, tol float64
		hold    time.Duration
		field   string
	}{
		{math.NaN(), 0.05, 0, "setpoint_k"},
		{8, 0, 0, "tolerance_k"},
		{8, 0.05, -time.Second, "hold"},
	} {
		if err := st.WaitStableK(ctx, bad.sp, bad.tol, bad.hold, time.Minute); err == nil || !strings.Contains(err.Error(), bad.field) {
			t.Errorf("WaitStableK(%g, %g, %v): %v, want an error naming %s", bad.sp, bad.tol, bad.hold, err, bad.field)
		}
	}
}

// Hold and timeout are instrument time: at Speed 1000 on the wall clock a
// 60 s timeout passes in about 60 ms of wall time.
func TestWaitStableKScaled(t *testing.T) {
	c := open(t, Options{Speed: 1000, OscillationK: 0.5})
	start := time.Now()
	err := c.WaitStableK(context.Background(), 4.2, 0.05, 30*time.Second, time.Minute)
	el := time.Since(start)
	if !errors.Is(err, ErrNotStable) {
		t.Fatalf("oscillating by ±0.5 K: %v, want ErrNotStable", err)
	}
	if el < 60*time.Millisecond || el > 10*time.Second {
		t.Errorf("a 60 s instrument-time timeout at Speed 1000 took %v of wall time, want about 60 ms", el)
	}
}
