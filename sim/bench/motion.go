package bench

import (
	"math"
	"time"
)

// profile is the kinematics of one motorised axis: a point-to-point move
// accelerates at AccelPerS2 up to SpeedPerS, cruises, and decelerates at the
// same rate (a trapezoidal speed profile). A move too short to reach the
// cruise speed is triangular. This is how step and servo motion controllers
// move (common practice, no published source). AccelPerS2 = +Inf gives a
// constant-speed ramp.
type profile struct {
	SpeedPerS  float64 // cruise speed, axis units per second
	AccelPerS2 float64 // acceleration = deceleration, axis units per second²
}

// durationS is the time of a move over distance d (either sign), seconds:
//
//	d ≥ v²/a:  T = d/v + v/a          (trapezoid: accelerate, cruise, decelerate)
//	d < v²/a:  T = 2·sqrt(d/a)        (triangle: accelerate to the midpoint, decelerate)
func (p profile) durationS(d float64) float64 {
	d = math.Abs(d)
	if d == 0 {
		return 0
	}
	v, a := p.SpeedPerS, p.AccelPerS2
	if math.IsInf(a, 1) {
		return d / v
	}
	if d >= v*v/a {
		return d/v + v/a
	}
	return 2 * math.Sqrt(d/a)
}

// travelled is the distance covered t seconds into a move of length d ≥ 0:
// 0 at t ≤ 0, d at t ≥ durationS(d), continuous and non-decreasing between.
func (p profile) travelled(d, t float64) float64 {
	T := p.durationS(d)
	switch {
	case d <= 0 || t <= 0:
		return 0
	case t >= T:
		return d
	}
	v, a := p.SpeedPerS, p.AccelPerS2
	if math.IsInf(a, 1) {
		return v * t
	}
	ta := v / a // time to reach cruise speed
	if d < v*v/a {
		ta = T / 2 // triangular: peak speed a·T/2 at the midpoint
	}
	switch {
	case t < ta:
		return a * t * t / 2
	case t <= T-ta:
		return a*ta*ta/2 + a*ta*(t-ta)
	default:
		r := T - t
		return d - a*r*r/2
	}
}

// motion is one move in flight on an axis.
type motion struct {
	fromPos, toPos float64
	start          time.Time // wall clock at the start of the move
	durS           float64   // instrument-time duration, s
}

// axis is the motion state of one motorised axis of the optical state
// (stage position in mm, half-wave-plate angle in deg, laser detuning in meV).
// It is owned by the state's mutex.
type axis struct {
	prof profile
	pos  float64 // position when still; the start of mv when moving
	mv   *motion // nil when still
	// cmd is the last target the axis arrived at (hasCmd false before the
	// first move and after a stopped or stalled one).
	cmd    float64
	hasCmd bool
}

// at is the axis position at wall time now, with speed the time scale
// (instrument seconds per wall second).
func (ax *axis) at(now time.Time, speed float64) float64 {
	if ax.mv == nil {
		return ax.pos
	}
	m := ax.mv
	t := now.Sub(m.start).Seconds() * speed
	d := m.toPos - m.fromPos
	s := ax.prof.travelled(math.Abs(d), t)
	if d < 0 {
		s = -s
	}
	if t >= m.durS {
		return m.toPos
	}
	return m.fromPos + s
}

// durationOf converts seconds of instrument time to a time.Duration.
func durationOf(s float64) time.Duration {
	return time.Duration(math.Round(s * float64(time.Second)))
}
