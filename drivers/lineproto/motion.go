package lineproto

import (
	"context"
	"fmt"
	"math"
	"time"

	"github.com/gliss-lab/gliss/drivers"
)

// axis describes the physical axis of a motion: its limits and speed from
// the bench file.
type axis struct {
	name, unit string
	min, max   float64
	speed      float64 // units/s; 0: unknown (the margin alone bounds the move)
	accel      float64 // units/s²; 0: infinite
}

// MotionTime is the time of a trapezoidal move over distance d at speed v
// and acceleration a (a triangular profile when the speed is never
// reached): d/v + v/a if d ≥ v²/a, else 2·sqrt(d/a). Kinematics of
// constant acceleration (common practice, no published source).
func MotionTime(d, v, a float64) time.Duration {
	d = math.Abs(d)
	if v <= 0 || d == 0 {
		return 0
	}
	var s float64
	switch {
	case a <= 0:
		s = d / v
	case d >= v*v/a:
		s = d/v + v/a
	default:
		s = 2 * math.Sqrt(d/a)
	}
	return time.Duration(s * float64(time.Second))
}

// deadline is how long a move over d may take before it is a failure:
// 1.5 × the motion time plus the configured margin.
func (in *Instrument) deadline(ax axis, d float64) time.Duration {
	return MotionTime(d, ax.speed, ax.accel)*3/2 + in.s.MotionMargin
}

func (in *Instrument) toDevice(phys float64) float64 { return phys*in.s.Scale + in.s.Offset }
func (in *Instrument) toPhys(dev float64) float64    { return (dev - in.s.Offset) / in.s.Scale }

// position reads the axis position in physical units (retried).
func (in *Instrument) position(ctx context.Context) (float64, error) {
	dev, err := in.readNumber(ctx, "read position", in.s.Commands.Position, "", 0)
	if err != nil {
		return 0, err
	}
	return in.toPhys(dev), nil
}

// busy asks the busy query once per attempt (retried); false without one.
func (in *Instrument) busy(ctx context.Context) (bool, bool, error) {
	q := in.s.Commands.Busy
	if q == nil {
		return false, false, nil
	}
	cmd, err := q.Send.Render(in.vars(0))
	if err != nil {
		return false, true, in.wrap("busy query", err)
	}
	b, err := retry(ctx, in, "busy query", func() (bool, error) {
		got, err := in.exchange(ctx, cmd, true, 0)
		if err != nil {
			return false, err
		}
		return ParseState(got, q.Busy, q.Ready)
	})
	return b, true, err
}

// Home sends the home command and waits for the axis to be ready.
func (in *Instrument) Home(ctx context.Context) error {
	c := in.s.Commands
	if c.Home.IsZero() {
		return in.errf("home: the bench file gives no home command")
	}
	cmd, err := c.Home.Render(in.vars(0))
	if err != nil {
		return in.wrap("home", err)
	}
	if err := in.command(ctx, "home", cmd, 0); err != nil {
		return err
	}
	ax := in.axisOfRole()
	full := ax.max - ax.min
	return in.waitIdle(ctx, "home", time.Now().Add(in.deadline(ax, full)))
}

func (in *Instrument) axisOfRole() axis {
	l := in.s.limits
	switch in.role {
	case drivers.RoleStage:
		return axis{min: l.StageMinMM, max: l.StageMaxMM, speed: l.StageSpeedMMPerS, accel: l.StageAccelMMPerS2}
	case drivers.RoleAttenuator:
		return axis{min: l.AngleMinDeg, max: l.AngleMaxDeg, speed: l.RotationSpeedDegPerS}
	}
	return axis{min: l.DetuningMinMeV, max: l.DetuningMaxMeV, speed: l.DetuningSpeedMeVPerS}
}

// waitIdle waits by the wait query, or by polling busy, until the deadline.
func (in *Instrument) waitIdle(ctx context.Context, what string, deadline time.Time) error {
	c := in.s.Commands
	if c.Wait != nil {
		cmd, err := c.Wait.Send.Render(in.vars(0))
		if err != nil {
			return in.wrap(what, err)
		}
		left := time.Until(deadline)
		got, err := in.exchange(ctx, cmd, true, left)
		if err != nil {
			return in.wrap(what+": wait for completion", err)
		}
		if c.Wait.Pattern != nil && c.Wait.Pattern.re != nil && !c.Wait.Pattern.Match(got) {
			return in.wrap(what, fmt.Errorf("%w: %q answered %q, want %q", ErrBadReply, cmd, got, c.Wait.Pattern))
		}
		return nil
	}
	for {
		b, has, err := in.busy(ctx)
		if err != nil {
			return err
		}
		if !has || !b {
			return nil
		}
		if time.Now().After(deadline) {
			return in.errf("%s: still busy at the deadline", what)
		}
		if err := sleep(ctx, in.s.Poll); err != nil {
			return in.wrap(what, err)
		}
	}
}

// moveTo moves an axis to target and returns once it has arrived within
// the tolerance; a move that does not arrive is an error.
func (in *Instrument) moveTo(ctx context.Context, ax axis, target float64) error {
	what := fmt.Sprintf("move to %.6g %s", target, ax.unit)
	if math.IsNaN(target) || math.IsInf(target, 0) {
		return in.errf("%s: %s %g is not a finite number: %w", what, ax.name, target, drivers.ErrLimit)
	}
	if (ax.min != 0 || ax.max != 0) && (target < ax.min || target > ax.max) {
		return in.errf("%s: %s %g outside [%g, %g] %s: %w", what, ax.name, target, ax.min, ax.max, ax.unit, drivers.ErrLimit)
	}
	c := in.s.Commands
	cmd, err := c.Move.Render(in.vars(in.toDevice(target)))
	if err != nil {
		return in.wrap(what, err)
	}
	from, err := in.position(ctx)
	if err != nil {
		return err
	}
	tol := in.s.Tolerance
	started := time.Now()
	deadline := started.Add(in.deadline(ax, target-from))
	for attempt := 0; ; attempt++ {
		err := in.command(ctx, what, cmd, 0)
		if err == nil {
			break
		}
		if ctx.Err() != nil {
			return err
		}
		if attempt >= in.s.Retries {
			return fmt.Errorf("%d attempts failed: %w: %w", attempt+1, drivers.ErrUnavailable, err)
		}
		// The command may or may not have been taken (a lost or garbled
		// acknowledgement, a refusal by a transient fault): look before
		// sending it again.
		in.log.Warn("move command failed; checking the position before any resend", "instrument", in.name, "err", err)
		if err := sleep(ctx, in.s.Backoff<<attempt); err != nil {
			return in.wrap(what, err)
		}
		if b, has, err := in.busy(ctx); err != nil {
			return err
		} else if has && b {
			break // it is moving: the command was taken
		}
		pos, err := in.position(ctx)
		if err != nil {
			return err
		}
		if math.Abs(pos-target) <= tol {
			break // it was taken and has arrived
		}
		if c.Busy == nil && c.Wait == nil {
			// No busy query: a position that changes means a move in progress.
			if err := sleep(ctx, in.s.Poll); err != nil {
				return in.wrap(what, err)
			}
			pos2, err := in.position(ctx)
			if err != nil {
				return err
			}
			if math.Abs(pos2-pos) > tol/10 {
				break
			}
		}
		in.log.Warn("move was not taken; sending it again", "instrument", in.name, "at", pos, "target", target)
	}
	if c.Busy != nil || c.Wait != nil {
		if err := in.waitIdle(ctx, what, deadline); err != nil {
			return err
		}
		pos, err := in.position(ctx)
		if err != nil {
			return err
		}
		if math.Abs(pos-target) > tol {
			return in.errf("%s: stopped at %.6g %s, %.3g %s from the target (tolerance %g)", what, pos, ax.unit, pos-target, ax.unit, tol)
		}
		return nil
	}
	// Poll the position until it is within tolerance.
	var pos float64
	for {
		pos, err = in.position(ctx)
		if err != nil {
			return err
		}
		if math.Abs(pos-target) <= tol {
			return nil
		}
		if time.Now().After(deadline) {
			return in.errf("%s: did not arrive: at %.6g %s after %v (deadline from %.6g %s at %g %s/s)",
				what, pos, ax.unit, time.Since(started).Round(time.Millisecond), math.Abs(target-from), ax.unit, ax.speed, ax.unit)
		}
		if err := sleep(ctx, in.s.Poll); err != nil {
			return in.wrap(what, err)
		}
	}
}
