package phonon

import (
	"testing"

	"github.com/gliss-lab/gliss/sim/model"
)

func BenchmarkRHSPieces(b *testing.B) {
	p := model.DemoParams()
	p.GDDPS2, p.AreaPi = 20, 10
	l := p.Ladder()
	bath := DemoBath()
	s := NewSolver()
	s.setup(&l, &bath)
	var y, dy [nY]float64
	y[0], y[1], y[2], y[3], y[4] = 0.5, 0.3, 0.2, 0.1, 0.05
	b.Run("rhs", func(b *testing.B) {
		t := 0.0
		for b.Loop() {
			t += 0.01
			if t > 5 {
				t = 0
			}
			s.rhs(t, &y, &dy)
		}
	})
	b.Run("eig", func(b *testing.B) {
		var e [3]float64
		var v [3][3]float64
		t := 0.0
		for b.Loop() {
			t += 0.01
			if t > 5 {
				t = 0
			}
			w := 0.5 * l.Envelope.RabiAt(t)
			ladderEig(s.e1+s.s1*t, s.e2+s.s2*t, -w, -w, &e, &v)
		}
	})
	b.Run("coef", func(b *testing.B) {
		var c coef
		t := 0.0
		for b.Loop() {
			t += 0.01
			if t > 5 {
				t = 0
			}
			s.coefAt(t, &c)
		}
	})
	b.Run("deriv", func(b *testing.B) {
		var c coef
		s.coefAt(1.3, &c)
		for b.Loop() {
			s.deriv(&c, &y, &dy)
		}
	})
	b.Run("redfield", func(b *testing.B) {
		e := [3]float64{-2, 0.7, 3}
		a := [3][3]float64{{0.5, 0.3, 0.1}, {0.3, 1, 0.4}, {0.1, 0.4, 1.5}}
		var rho, out [3][3]complex128
		rho[0][0], rho[0][1], rho[1][0] = 1, 0.1, 0.1
		for b.Loop() {
			redfieldEig(&s.sp, &e, &a, &rho, &out)
		}
	})
}

// BenchmarkDemoPointParts splits the cost of BenchmarkDemoPoint's point:
// "coherent" is this package's integrator with the bath off (the coherent
// part and the radiative decay only: the floor of the method at this step
// count), "exact" has the Redfield term computed exactly at every stage
// (interpolation off), "full" is the solver as used.
func BenchmarkDemoPointParts(b *testing.B) {
	p := model.DemoParams()
	p.GDDPS2, p.AreaPi = 20, 10
	l := p.Ladder()
	bath := DemoBath()
	for _, part := range []struct {
		name   string
		bath   *Bath
		interp bool
	}{{"coherent", nil, true}, {"exact", &bath, false}, {"full", &bath, true}} {
		b.Run(part.name, func(b *testing.B) {
			s := NewSolver()
			s.interpolate = part.interp
			for b.Loop() {
				if _, err := s.solveLadder(&l, part.bath, DefaultTolerance); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(s.steps), "steps")
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/float64(s.steps), "ns/step")
		})
	}
}
