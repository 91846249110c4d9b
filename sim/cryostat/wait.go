package cryostat

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/gliss-lab/gliss/drivers"
)

// ErrNotStable marks a temperature that did not stay within its tolerance
// for the hold time before the timeout. The scan engine pauses on it with the
// error's text as the reason.
var ErrNotStable = errors.New("temperature not stable")

// StabilityError says why WaitStable gave up. It wraps ErrNotStable.
type StabilityError struct {
	Name      string
	SetpointK float64
	TolK      float64
	Hold      time.Duration
	Timeout   time.Duration
	// LastK is the last reading; LongestHeld the longest time the readings
	// stayed within the tolerance.
	LastK       float64
	LongestHeld time.Duration
}

func (e *StabilityError) Error() string {
	return fmt.Sprintf("thermometer %q: temperature %.3f K not stable within ±%g K of setpoint %g K for %v after %v (longest within tolerance: %v)",
		e.Name, e.LastK, e.TolK, e.SetpointK, e.Hold, e.Timeout, e.LongestHeld.Round(time.Millisecond))
}

func (e *StabilityError) Unwrap() error { return ErrNotStable }

// CheckStability validates the arguments of a wait: the tolerance must be
// > 0 K, the hold ≥ 0 and the timeout > 0. Errors name the field.
func CheckStability(tolK float64, hold, timeout time.Duration) error {
	if !(tolK > 0) || math.IsInf(tolK, 0) {
		return fmt.Errorf("tolerance_k %g: want a finite value > 0 K", tolK)
	}
	if hold < 0 {
		return fmt.Errorf("hold %v: want ≥ 0", hold)
	}
	if timeout <= 0 {
		return fmt.Errorf("timeout %v: want > 0", timeout)
	}
	return nil
}

// WaitStable waits until the readings of th stay within ±tolK of setpointK
// for hold, polling every poll (0: 1 s), for at most timeout (wall time).
// It works with any thermometer; it does not set the setpoint. On timeout
// the error is a *StabilityError wrapping ErrNotStable; a failed reading or a
// cancelled ctx ends the wait with that error.
func WaitStable(ctx context.Context, th drivers.Thermometer, setpointK, tolK float64, hold, timeout, poll time.Duration) error {
	if err := CheckStability(tolK, hold, timeout); err != nil {
		return err
	}
	if poll <= 0 {
		poll = time.Second
	}
	return waitStable(ctx, wallClock{}, 1, th.TemperatureK, "thermometer", setpointK, tolK, hold, timeout, poll)
}

// WaitStable waits until the cryostat's readings stay within ±tolK of its
// setpoint for hold, for at most timeout. hold and timeout are instrument
// time (scaled by Options.Speed like everything else); readings are polled
// every second of instrument time, or hold/5 when that is shorter.
func (c *Cryostat) WaitStable(ctx context.Context, tolK float64, hold, timeout time.Duration) error {
	if err := CheckStability(tolK, hold, timeout); err != nil {
		return fmt.Errorf("cryostat %q: wait for stability: %w", c.o.Name, err)
	}
	sp, err := c.SetpointK(ctx)
	if err != nil {
		return err
	}
	return c.waitStableAt(ctx, sp, tolK, hold, timeout)
}

var _ drivers.Stabilizer = (*Cryostat)(nil)

// WaitStableK implements drivers.Stabilizer: it waits until the readings stay
// within ±tolK of setpointK (the setpoint the caller has just set) for hold,
// for at most timeout, both in instrument time like WaitStable. It does not
// read or change the controller's setpoint. On timeout the error is a
// *StabilityError wrapping ErrNotStable.
func (c *Cryostat) WaitStableK(ctx context.Context, setpointK, tolK float64, hold, timeout time.Duration) error {
	if err := CheckStability(tolK, hold, timeout); err != nil {
		return fmt.Errorf("cryostat %q: wait for stability: %w", c.o.Name, err)
	}
	if math.IsNaN(setpointK) || math.IsInf(setpointK, 0) {
		return fmt.Errorf("cryostat %q: wait for stability: setpoint_k %g: want a finite temperature", c.o.Name, setpointK)
	}
	return c.waitStableAt(ctx, setpointK, tolK, hold, timeout)
}

// waitStableAt polls every second of instrument time, or hold/5 when that
// is shorter.
func (c *Cryostat) waitStableAt(ctx context.Context, sp, tolK float64, hold, timeout time.Duration) error {
	poll := time.Second
	if hold > 0 && hold/5 < poll {
		poll = hold / 5
	}
	return waitStable(ctx, c.o.Clock, c.o.Speed, c.TemperatureK, c.o.Name, sp, tolK, hold, timeout, poll)
}

// waitStable is the loop of both waits. hold, timeout and poll are in the
// caller's time; the clock runs speed times slower than that.
func waitStable(ctx context.Context, clk Clock, speed float64, read func(context.Context) (float64, error),
	name string, setpointK, tolK float64, hold, timeout, poll time.Duration) error {
	inst := func(d time.Duration) time.Duration { return time.Duration(float64(d) * speed) }
	start := clk.Now()
	var (
		since      time.Time // start of the current run within tolerance
		inRun      bool
		longest    time.Duration
		last       = math.NaN()
		pollWall   = time.Duration(float64(poll) / speed)
		elapsedNow = func() time.Duration { return inst(clk.Now().Sub(start)) }
	)
	for {
		k, err := read(ctx)
		if err != nil {
			return fmt.Errorf("thermometer %q: wait for %g K: %w", name, setpointK, err)
		}
		last = k
		now := clk.Now()
		if math.Abs(k-setpointK) <= tolK {
			if !inRun {
				since, inRun = now, true
			}
			held := inst(now.Sub(since))
			longest = max(longest, held)
			if held >= hold {
				return nil
			}
		} else {
			inRun = false
		}
		if elapsedNow() >= timeout {
			return &StabilityError{Name: name, SetpointK: setpointK, TolK: tolK, Hold: hold, Timeout: timeout,
				LastK: last, LongestHeld: longest}
		}
		if err := clk.Sleep(ctx, pollWall); err != nil {
			return fmt.Errorf("thermometer %q: wait for %g K: %w", name, setpointK, err)
		}
	}
}
