package bench

import (
	"math"
	"testing"
	"time"
)

// Move times of the simulated stage against the kinematics of uniform
// acceleration (a trapezoidal speed profile: T = d/v + v/a when d ≥ v²/a,
// else T = 2·sqrt(d/a); textbook kinematics, common practice, no published
// source), with the demo stage of PHYSICS.md: 25 mm/s, 50 mm/s².
func TestMoveDurationMM(t *testing.T) {
	for _, c := range []struct {
		from, to float64
		want     time.Duration
	}{
		{0, 600, 24500 * time.Millisecond},      // 600/25 + 25/50 = 24.5 s
		{600, 0, 24500 * time.Millisecond},      // direction does not matter
		{0, 1200, 48500 * time.Millisecond},     // 1200/25 + 0.5
		{100, 112.5, 1000 * time.Millisecond},   // d = v²/a = 12.5 mm: trapezoid and triangle meet, 1 s
		{100, 110, 894427191 * time.Nanosecond}, // triangle: 2·sqrt(10/50) s
		{5, 5, 0},
	} {
		got := MoveDurationMM(c.from, c.to)
		if d := got - c.want; d < -time.Microsecond || d > time.Microsecond {
			t.Errorf("MoveDurationMM(%g, %g) = %v, want %v", c.from, c.to, got, c.want)
		}
	}
}

func TestProfileTravelled(t *testing.T) {
	p := profile{SpeedPerS: 25, AccelPerS2: 50}
	for _, d := range []float64{600, 12.5, 10, 0.001} {
		T := p.durationS(d)
		// End points, and the midpoint by the symmetry of the profile.
		if got := p.travelled(d, 0); got != 0 {
			t.Errorf("d=%g: travelled(0) = %g", d, got)
		}
		if got := p.travelled(d, T); got != d {
			t.Errorf("d=%g: travelled(T) = %g", d, got)
		}
		if got := p.travelled(d, T/2); math.Abs(got-d/2) > 1e-9*d {
			t.Errorf("d=%g: travelled(T/2) = %g, want %g", d, got, d/2)
		}
		prev := 0.0
		for i := 1; i <= 1000; i++ {
			s := p.travelled(d, T*float64(i)/1000)
			if s < prev-1e-12 || s > d {
				t.Fatalf("d=%g: travelled not monotone in [0, d] at step %d: %g after %g", d, i, s, prev)
			}
			// Speed never exceeds the cruise speed: |Δs| ≤ v·Δt.
			if s-prev > 25*T/1000*(1+1e-9) {
				t.Fatalf("d=%g: speed above 25 mm/s at step %d", d, i)
			}
			prev = s
		}
	}
	// s = a·t²/2 during the acceleration: at t = v/a = 0.5 s, 6.25 mm.
	if got := p.travelled(600, 0.5); math.Abs(got-6.25) > 1e-12 {
		t.Errorf("travelled(600, 0.5 s) = %g, want 6.25 mm", got)
	}
	// Cruise: after 10 s, 6.25 + 25·9.5 mm.
	if got := p.travelled(600, 10); math.Abs(got-243.75) > 1e-12 {
		t.Errorf("travelled(600, 10 s) = %g, want 243.75 mm", got)
	}
	lin := profile{SpeedPerS: 2, AccelPerS2: math.Inf(1)}
	if got := lin.durationS(3); got != 1.5 {
		t.Errorf("constant-speed ramp: duration %g, want 1.5 s", got)
	}
}

// FuzzProfile checks that any move profile stays within [0, d], is
// non-decreasing, and never beats the cruise speed.
func FuzzProfile(f *testing.F) {
	f.Add(600.0, 25.0, 50.0, 0.3)
	f.Add(0.01, 20.0, 40.0, 0.9)
	f.Add(1e-9, 1.0, 1e9, 0.5)
	f.Fuzz(func(t *testing.T, d, v, a, frac float64) {
		if !(d > 0 && d < 1e6 && v > 1e-3 && v < 1e6 && a > 1e-3 && a < 1e9 && frac >= 0 && frac <= 1) {
			t.Skip()
		}
		p := profile{SpeedPerS: v, AccelPerS2: a}
		T := p.durationS(d)
		if !(T > 0) || math.IsInf(T, 0) {
			t.Fatalf("duration %g for d=%g v=%g a=%g", T, d, v, a)
		}
		t1 := T * frac
		t2 := math.Min(T, t1+T*1e-3)
		s1, s2 := p.travelled(d, t1), p.travelled(d, t2)
		tol := 1e-9 * d
		if s1 < -tol || s2 > d+tol || s2 < s1-tol {
			t.Fatalf("d=%g v=%g a=%g: s(%g)=%g s(%g)=%g", d, v, a, t1, s1, t2, s2)
		}
		if s2-s1 > v*(t2-t1)*(1+1e-6)+tol {
			t.Fatalf("d=%g v=%g a=%g: faster than %g between %g and %g", d, v, a, v, t1, t2)
		}
		// The move can never be shorter than at constant full speed.
		if T < d/v*(1-1e-12) {
			t.Fatalf("duration %g shorter than d/v = %g", T, d/v)
		}
	})
}
