package model

import (
	"errors"
	"fmt"
	"math"
)

// The integrator is the explicit Runge–Kutta method of order 8 of Dormand &
// Prince with Hairer's embedded 5th/3rd-order error estimate (DOP853; Hairer,
// Nørsett & Wanner, Solving Ordinary Differential Equations I, 2nd ed.,
// §II.10) and its step-size controller, written for this problem:
//
//   - It works in the interaction picture of the diagonal part of H: the
//     diagonal energies E_j + S_j·t integrate in closed form to the phases
//     φ_j(t), so the right-hand side is proportional to Ω(t) (plus slow decay
//     terms) and the steps grow long wherever the pulse is weak.
//   - The time-dependent coefficients (Ω and the two phase factors) do not
//     depend on the state: all eleven stage times of a step are computed
//     first (independent chains the processor overlaps), and the last is
//     shared with the first stage of the next step.
//   - Several points that differ only in pulse area can share one step
//     sequence and one set of coefficients (lanes; used by Map), each lane
//     still meeting the tolerance.
//   - Without decay it integrates the state vector (6 reals); with decay the
//     density matrix (9 reals) plus the two emitted-photon integrals γ·∫ρ dt as
//     extra components, so the yields come with the same error control.
//   - All state lives in fixed arrays inside Solver: no heap allocation per
//     step or per solve.

const (
	nMax = 11

	// DefaultTolerance is the relative and absolute tolerance used when
	// Params.Tolerance is 0. It gives populations and yields to 1e-6 or better
	// (TestDefaultToleranceAccuracy).
	DefaultTolerance = 3e-9

	maxSteps = 5_000_000
)

// Step controller constants (Hairer's DOP853 defaults, HNW I §II.10).
const (
	ctlSafe  = 0.9
	ctlExpo  = 1.0 / 8
	ctlFacc1 = 1 / 0.333 // largest shrink
	ctlFacc2 = 1 / 6.0   // largest growth
)

// ErrTooManySteps is returned when the solver needs more than its step budget.
var ErrTooManySteps = errors.New("solver: too many steps")

// Solver integrates Ladder problems. It is reusable and not safe for
// concurrent use; give each goroutine its own.
type Solver struct {
	n       int
	density bool

	// problem constants
	env            Envelope
	pulse          Pulse
	e1, s1, e21    float64 // E1, S1, E2−E1 (rad/ps, rad/ps²)
	s21            float64 // S2−S1
	k01h, k12h     float64 // k/2
	g1, g2         float64 // γ1, γ2
	d01, d12, d02  float64 // coherence decay rates
	rejected       bool
	rhsAmp         float64 // envelope scale used by rhs (initial step)
	lane                   // scratch of the initial step; the state of a single solve
	single         []lane  // the lane of a single solve
	one            [1]float64
	steps, rejects int
}

// NewSolver returns a solver ready for use.
func NewSolver() *Solver { return &Solver{} }

// Solve integrates one point of the dot model. See Params.
func (s *Solver) Solve(p Params) (Result, error) {
	if err := p.Validate(); err != nil {
		return Result{}, err
	}
	s.pulse = p.Pulse()
	l := p.ladderWith(s.pulse, &s.pulse)
	r, err := s.SolveLadder(&l, p.tolerance())
	if err != nil {
		return Result{}, fmt.Errorf("model: %+v: %w", p, err)
	}
	return resultOf(&r), nil
}

// Solve is NewSolver().Solve(p).
func Solve(p Params) (Result, error) { return NewSolver().Solve(p) }

func resultOf(r *LadderResult) Result {
	g, x, xx := real(r.Rho[0][0]), real(r.Rho[1][1]), real(r.Rho[2][2])
	return Result{
		G: g, X: x, XX: xx,
		NXX: xx + r.Decayed[1],
		NX:  x + xx + r.Decayed[0],
	}
}

// SolveLadder integrates l from StartPS to EndPS with relative and absolute
// tolerance tol (0: DefaultTolerance).
func (s *Solver) SolveLadder(l *Ladder, tol float64) (LadderResult, error) {
	if err := l.check(); err != nil {
		return LadderResult{}, err
	}
	if tol == 0 {
		tol = DefaultTolerance
	}
	if !(tol > 0 && tol < 1) {
		return LadderResult{}, fmt.Errorf("solver: tolerance %g, want 0 < tol < 1", tol)
	}
	s.setup(l)
	if s.single == nil {
		s.single = make([]lane, 1)
	}
	s.single[0] = lane{y: s.y}
	s.one[0] = 1
	if err := s.integrate(l.StartPS, l.EndPS, l.MaxStepPS, tol, s.single, s.one[:], 0); err != nil {
		return LadderResult{}, err
	}
	s.y = s.single[0].y
	var r LadderResult
	s.finish(l.EndPS, &r)
	r.Steps, r.Rejected = s.steps, s.rejects
	return r, nil
}

func (s *Solver) setup(l *Ladder) {
	s.env = l.Envelope
	s.e1, s.s1 = l.EnergyRadPS[1], l.SweepRadPS2[1]
	s.e21, s.s21 = l.EnergyRadPS[2]-l.EnergyRadPS[1], l.SweepRadPS2[2]-l.SweepRadPS2[1]
	s.k01h, s.k12h = 0.5*l.Coupling[0], 0.5*l.Coupling[1]
	s.g1, s.g2 = l.DecayPerPS[0], l.DecayPerPS[1]
	s.d01, s.d12, s.d02 = 0.5*s.g1, 0.5*(s.g1+s.g2), 0.5*s.g2
	s.density = s.g1 != 0 || s.g2 != 0
	s.steps, s.rejects, s.rejected = 0, 0, false

	psi := l.Initial
	if psi == [3]complex128{} {
		psi[0] = 1
	}
	// interaction picture: ψ̃_j = ψ_j·e^{iφ_j(t0)}
	t0 := l.StartPS
	u1, v := s.phases(t0)
	u2 := u1 * v
	pt := [3]complex128{psi[0], psi[1] * u1, psi[2] * u2}
	s.y = [nMax]float64{}
	s.k = [12][nMax]float64{} // unused components must stay zero
	if !s.density {
		s.n = 6
		for j := range 3 {
			s.y[2*j], s.y[2*j+1] = real(pt[j]), imag(pt[j])
		}
		return
	}
	s.n = 11
	// ρ̃_jk = ψ̃_j ψ̃_k*
	s.y[0] = real(pt[0] * cmplxConj(pt[0]))
	s.y[1] = real(pt[1] * cmplxConj(pt[1]))
	s.y[2] = real(pt[2] * cmplxConj(pt[2]))
	c01 := pt[0] * cmplxConj(pt[1])
	c12 := pt[1] * cmplxConj(pt[2])
	c02 := pt[0] * cmplxConj(pt[2])
	s.y[3], s.y[4] = real(c01), imag(c01)
	s.y[5], s.y[6] = real(c12), imag(c12)
	s.y[7], s.y[8] = real(c02), imag(c02)
}

func cmplxConj(z complex128) complex128 { return complex(real(z), -imag(z)) }

// phases returns u1 = e^{iφ1(t)} and v = e^{i(φ2(t)−φ1(t))}.
func (s *Solver) phases(t float64) (u1, v complex128) {
	sn, cs := math.Sincos(s.e1*t + 0.5*s.s1*t*t)
	sn2, cs2 := math.Sincos(s.e21*t + 0.5*s.s21*t*t)
	return complex(cs, sn), complex(cs2, sn2)
}

// finish converts the interaction-picture state at t back to the frame of H.
func (s *Solver) finish(t float64, r *LadderResult) {
	u1, v := s.phases(t)
	u2 := u1 * v
	if !s.density {
		psi := [3]complex128{
			complex(s.y[0], s.y[1]),
			complex(s.y[2], s.y[3]) * cmplxConj(u1),
			complex(s.y[4], s.y[5]) * cmplxConj(u2),
		}
		for j := range 3 {
			for k := range 3 {
				r.Rho[j][k] = psi[j] * cmplxConj(psi[k])
			}
		}
		return
	}
	// c_jk = c̃_jk·e^{−i(φ_j−φ_k)}: c01 = c̃01·u1, c12 = c̃12·v, c02 = c̃02·u2
	c01 := complex(s.y[3], s.y[4]) * u1
	c12 := complex(s.y[5], s.y[6]) * v
	c02 := complex(s.y[7], s.y[8]) * u2
	r.Rho = [3][3]complex128{
		{complex(s.y[0], 0), c01, c02},
		{cmplxConj(c01), complex(s.y[1], 0), c12},
		{cmplxConj(c02), cmplxConj(c12), complex(s.y[2], 0)},
	}
	r.Decayed = [2]float64{s.y[9], s.y[10]}
}

// coef holds the time-dependent coefficients of the right-hand side at one
// time: the couplings w0 = k01·Ω/2, w1 = k12·Ω/2 and the phase factors
// u1 = e^{iφ1} = cs + i·sn, v = e^{i(φ2−φ1)} = cv + i·sv.
type coef struct{ w0, w1, cs, sn, cv, sv float64 }

func (s *Solver) coefAt(t float64, c *coef) {
	om := s.env.RabiAt(t)
	c.w0, c.w1 = s.k01h*om, s.k12h*om
	c.sn, c.cs = math.Sincos(s.e1*t + 0.5*s.s1*t*t)
	c.sv, c.cv = math.Sincos(s.e21*t + 0.5*s.s21*t*t)
}

// deriv evaluates dy/dt from the coefficients c at the same time, with the
// envelope scaled by amp.
func (s *Solver) deriv(c *coef, amp float64, y, dy *[nMax]float64) {
	w0, w1 := amp*c.w0, amp*c.w1
	cs, sn, cv, sv := c.cs, c.sn, c.cv, c.sv
	if !s.density {
		// dψ̃0 = i·w0·ψ̃1·ū1
		// dψ̃1 = i·(w0·ψ̃0·u1 + w1·ψ̃2·v̄)
		// dψ̃2 = i·w1·ψ̃1·v
		ar, ai := y[0], y[1]
		br, bi := y[2], y[3]
		cr, ci := y[4], y[5]
		xr, xi := br*cs+bi*sn, bi*cs-br*sn
		dy[0], dy[1] = -w0*xi, w0*xr
		zr := w0*(ar*cs-ai*sn) + w1*(cr*cv+ci*sv)
		zi := w0*(ai*cs+ar*sn) + w1*(ci*cv-cr*sv)
		dy[2], dy[3] = -zi, zr
		qr, qi := br*cv-bi*sv, bi*cv+br*sv
		dy[4], dy[5] = -w1*qi, w1*qr
		return
	}
	p0, p1, p2 := y[0], y[1], y[2]
	ar, ai := y[3], y[4] // c̃01
	br, bi := y[5], y[6] // c̃12
	cr, ci := y[7], y[8] // c̃02
	// Im(c̃01·u1), Im(c̃12·v)
	im01 := ai*cs + ar*sn
	im12 := bi*cv + br*sv
	dy[0] = 2*w0*im01 + s.g1*p1
	dy[1] = -2*w0*im01 + 2*w1*im12 - s.g1*p1 + s.g2*p2
	dy[2] = -2*w1*im12 - s.g2*p2
	// dc̃01 = −i[w0(p0−p1)ū1 + w1·c̃02·v] − Γ01·c̃01
	d := w0 * (p0 - p1)
	zr := d*cs + w1*(cr*cv-ci*sv)
	zi := -d*sn + w1*(ci*cv+cr*sv)
	dy[3] = zi - s.d01*ar
	dy[4] = -zr - s.d01*ai
	// dc̃12 = −i[w1(p1−p2)v̄ − w0·c̃02·u1] − Γ12·c̃12
	d = w1 * (p1 - p2)
	zr = d*cv - w0*(cr*cs-ci*sn)
	zi = -d*sv - w0*(ci*cs+cr*sn)
	dy[5] = zi - s.d12*br
	dy[6] = -zr - s.d12*bi
	// dc̃02 = −i[w1·c̃01·v̄ − w0·c̃12·ū1] − Γ02·c̃02
	zr = w1*(ar*cv+ai*sv) - w0*(br*cs+bi*sn)
	zi = w1*(ai*cv-ar*sv) - w0*(bi*cs-br*sn)
	dy[7] = zi - s.d02*cr
	dy[8] = -zr - s.d02*ci
	// emitted photons
	dy[9] = s.g1 * p1
	dy[10] = s.g2 * p2
}

func (s *Solver) rhs(t float64, y, dy *[nMax]float64) {
	var c coef
	s.coefAt(t, &c)
	s.deriv(&c, s.rhsAmp, y, dy)
}

func (s *Solver) errNorm(y, dy *[nMax]float64, tol float64) float64 {
	var sum float64
	for i := 0; i < s.n; i++ {
		q := dy[i] / (tol + tol*math.Abs(y[i]))
		sum += q * q
	}
	return math.Sqrt(sum / float64(s.n))
}

// initialStep is Hairer's starting-step heuristic (HNW I, §II.4), order 8.
func (s *Solver) initialStep(t float64, f0 *[nMax]float64, hmax, tol float64) float64 {
	d0 := s.errNorm(&s.y, &s.y, tol)
	d1 := s.errNorm(&s.y, f0, tol)
	h0 := 1e-6
	if d0 >= 1e-10 && d1 >= 1e-10 {
		h0 = 0.01 * d0 / d1
	}
	h0 = min(h0, hmax)
	for i := 0; i < s.n; i++ {
		s.ytmp[i] = s.y[i] + h0*f0[i]
	}
	f1 := &s.k[1]
	s.rhs(t+h0, &s.ytmp, f1)
	for i := 0; i < s.n; i++ {
		s.ynew[i] = f1[i] - f0[i]
	}
	d2 := s.errNorm(&s.y, &s.ynew, tol) / h0
	var h1 float64
	if m := max(d1, d2); m <= 1e-15 {
		h1 = max(1e-6, h0*1e-3)
	} else {
		h1 = math.Pow(0.01/m, 1.0/8)
	}
	return min(100*h0, h1, hmax)
}

// integrate advances every lane from t0 to t1 on one shared step sequence:
// the step is accepted when the error measure of every lane is ≤ 1, so each
// lane is at least as accurate as it would be alone. Lane j is driven by
// amps[j]·Ω(t); first is the lane that sets the initial step (the largest
// amplitude). The lanes hold the initial state in y and zero stages.
func (s *Solver) integrate(t0, t1, hmax, tol float64, lanes []lane, amps []float64, first int) error {
	if hmax <= 0 || hmax > t1-t0 {
		hmax = t1 - t0
	}
	t := t0
	var cEnd coef   // coefficients at the current t (first stage)
	var cs [12]coef // coefficients at the stage times of a step
	s.coefAt(t, &cEnd)
	for j := range lanes {
		s.deriv(&cEnd, amps[j], &lanes[j].y, &lanes[j].k[0])
	}
	s.y = lanes[first].y
	s.rhsAmp = amps[first]
	h := s.initialStep(t, &lanes[first].k[0], hmax, tol)
	for {
		if s.steps+s.rejects > maxSteps {
			return fmt.Errorf("%w: %d steps reached at t = %g ps of [%g, %g]", ErrTooManySteps, maxSteps, t, t0, t1)
		}
		last := false
		if t+1.01*h >= t1 {
			h = t1 - t
			last = true
		}
		tn := t + h
		if last {
			tn = t1
		}
		// the coefficients of all stage times first: independent of the
		// state, they form eleven independent chains of transcendental
		// functions that the processor overlaps
		for i := 1; i < 11; i++ {
			s.coefAt(t+dopC[i]*h, &cs[i])
		}
		s.coefAt(tn, &cEnd)
		cs[11] = cEnd
		for i := 1; i < 12; i++ {
			for j := range lanes {
				ln := &lanes[j]
				ln.stageArg(i, h)
				s.deriv(&cs[i], amps[j], &ln.ytmp, &ln.k[i])
			}
		}
		var errv float64
		for j := range lanes {
			errv = max(errv, lanes[j].combine(h, tol, s.n))
		}
		fac11 := math.Pow(errv, ctlExpo)
		fac := max(ctlFacc2, min(ctlFacc1, fac11/ctlSafe))
		if errv <= 1 {
			s.steps++
			t = tn
			// first stage of the next step: f(t+h, y_new), sharing the
			// coefficients of the last stage
			for j := range lanes {
				ln := &lanes[j]
				ln.y = ln.ynew
				s.deriv(&cEnd, amps[j], &ln.y, &ln.k[0])
			}
			if last {
				return nil
			}
			hnew := h / fac
			if s.rejected {
				hnew = min(hnew, h)
			}
			s.rejected = false
			h = min(hnew, hmax)
		} else {
			s.rejects++
			s.rejected = true
			h /= min(ctlFacc1, fac11/ctlSafe)
			// cEnd must stay the coefficients of t
			s.coefAt(t, &cEnd)
			if t+h == t {
				return fmt.Errorf("solver: step size underflow at t = %g ps", t)
			}
		}
	}
}
