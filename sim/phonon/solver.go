package phonon

import (
	"errors"
	"fmt"
	"math"

	"github.com/gliss-lab/gliss/sim/model"
)

// The phonon solver integrates the density matrix of the dot model
// (model.Params.Ladder: PHYSICS.md §1–§2) with the secular Bloch–Redfield
// phonon term of §7 added, by the embedded Runge–Kutta method DOP853 of
// Dormand & Prince with Hairer's error estimate and step control (Hairer,
// Nørsett & Wanner, Solving ODEs I, 2nd ed., §II.10; dop853_coef.go).
//
// The state lives in the interaction picture of the diagonal part of H, whose
// phases are known in closed form (model.Ladder.Phase): the coherent part of
// the right-hand side is then proportional to Ω(t), so steps grow long in the
// wings of the pulse. At every right-hand-side call the lab-frame H(t) is
// diagonalised (symEig3), the density matrix is taken to that eigenbasis, the
// secular Redfield tensor of QuTiP's brmesolve is applied (redfieldEig) and
// the result is taken back — the same construction as brmesolve, which also
// keeps the coherent part and the Lindblad radiative decay exact and adds the
// Redfield term in the instantaneous eigenbasis.
//
// State: ρ̃00, ρ̃11, ρ̃22, Re/Im ρ̃01, Re/Im ρ̃12, Re/Im ρ̃02, then γ1·∫ρ11 dt and
// γ2·∫ρ22 dt (the emitted photons, integrated with the same error control).
// Everything lives in fixed arrays in Solver: no allocation per step or point.

const nY = 11

// DefaultTolerance is the relative and absolute tolerance of this solver when
// Params.Tolerance is 0. It gives populations and yields within 4e-7
// of QuTiP's brmesolve at atol 1e-10, rtol 1e-8 (TestGoldenBrmesolve and
// BenchmarkGoldenCase report the difference). It is this solver's own: the
// plain model's DefaultTolerance belongs to its own integrator.
const DefaultTolerance = 1e-8

// maxSteps bounds the work of one point.
const maxSteps = 5_000_000

// rabiFloorRadPS: below this Rabi frequency the Redfield term is skipped. At
// Ω → 0 the eigenbasis is the bare basis, S is diagonal in it and J(0) = 0, so
// the term vanishes; at Ω below 1e-10 rad/ps the rates are below 1e-18 /ps.
const rabiFloorRadPS = 1e-10

// ErrTooManySteps is returned when one point needs more than maxSteps steps.
var ErrTooManySteps = errors.New("phonon solver: too many steps")

// Solver solves points of the dot model with phonons. It is reusable and not
// safe for concurrent use: give each goroutine its own.
type Solver struct {
	plain *model.Solver

	// problem
	env            model.Envelope
	e1, s1, e2, s2 float64 // diagonal of H: E_j + S_j·t, rad/ps
	k01, k12       float64 // couplings of Ω/2 on the two links
	g1, g2         float64 // radiative decay X→G, XX→X, 1/ps
	bath           bool
	sp             spectrum
	vWarm          [3][3]float64 // eigenvectors of the last H(t), the warm start of the next

	// integrator
	k           [12][nY]float64
	y, ynew, yt [nY]float64
	steps       int
	rejects     int
	rhsCalls    int
}

// NewSolver returns a solver ready for use.
func NewSolver() *Solver { return &Solver{plain: model.NewSolver()} }

// Solve solves one point. With b == nil or b.AlphaPS2 == 0 it returns the
// plain model's result (model.Solver.Solve), bit for bit.
func (s *Solver) Solve(p model.Params, b *Bath) (model.Result, error) {
	if !b.Active() {
		return s.plain.Solve(p)
	}
	if err := p.Validate(); err != nil {
		return model.Result{}, err
	}
	if err := b.Validate(); err != nil {
		return model.Result{}, err
	}
	tol := p.Tolerance
	if tol == 0 {
		tol = DefaultTolerance
	}
	l := p.Ladder()
	st, err := s.solveLadder(&l, b, tol)
	if err != nil {
		return model.Result{}, fmt.Errorf("phonon: %+v with bath %+v: %w", p, *b, err)
	}
	return st.result(), nil
}

// Solve is NewSolver().Solve(p, b).
func Solve(p model.Params, b *Bath) (model.Result, error) { return NewSolver().Solve(p, b) }

// endState is the density matrix at the end of the window (lab frame) and the
// emitted photons.
type endState struct {
	rho     [3][3]complex128
	decayed [2]float64
	steps   int
	rejects int
	calls   int
}

func (e *endState) result() model.Result {
	g, x, xx := real(e.rho[0][0]), real(e.rho[1][1]), real(e.rho[2][2])
	return model.Result{G: g, X: x, XX: xx, NX: x + xx + e.decayed[0], NXX: xx + e.decayed[1]}
}

// solveLadder integrates l with the bath b (may be inactive: then only the
// coherent part and the radiative decay) from l.StartPS to l.EndPS, starting
// in level 0.
func (s *Solver) solveLadder(l *model.Ladder, b *Bath, tol float64) (endState, error) {
	s.setup(l, b)
	s.y = [nY]float64{}
	s.y[0] = 1
	if err := s.integrate(l.StartPS, l.EndPS, l.MaxStepPS, tol); err != nil {
		return endState{}, err
	}
	var st endState
	s.labRho(l.EndPS, &s.y, &st.rho)
	st.decayed = [2]float64{s.y[9], s.y[10]}
	st.steps, st.rejects, st.calls = s.steps, s.rejects, s.rhsCalls
	return st, nil
}

func (s *Solver) setup(l *model.Ladder, b *Bath) {
	s.env = l.Envelope
	s.e1, s.s1 = l.EnergyRadPS[1], l.SweepRadPS2[1]
	s.e2, s.s2 = l.EnergyRadPS[2], l.SweepRadPS2[2]
	s.k01, s.k12 = l.Coupling[0], l.Coupling[1]
	s.g1, s.g2 = l.DecayPerPS[0], l.DecayPerPS[1]
	s.bath = b.Active()
	if s.bath {
		s.sp = newSpectrum(b)
	}
	s.steps, s.rejects, s.rhsCalls = 0, 0, 0
	// Every point starts from the same basis, so a point is a pure function
	// of its parameters whatever the solver solved before.
	s.vWarm = [3][3]float64{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}}
}

// phases returns u1 = e^{iφ1(t)} and u2 = e^{iφ2(t)}, φ_j = E_j·t + S_j·t²/2.
func (s *Solver) phases(t float64) (u1, u2 complex128) {
	sn1, cs1 := math.Sincos(s.e1*t + 0.5*s.s1*t*t)
	sn2, cs2 := math.Sincos(s.e2*t + 0.5*s.s2*t*t)
	return complex(cs1, sn1), complex(cs2, sn2)
}

// labRho converts the interaction-picture state y at t to the lab-frame
// density matrix: ρ_jk = ρ̃_jk·e^{−i(φ_j−φ_k)}.
func (s *Solver) labRho(t float64, y *[nY]float64, rho *[3][3]complex128) {
	u1, u2 := s.phases(t)
	r01 := complex(y[3], y[4]) * u1
	r12 := complex(y[5], y[6]) * u2 * conj(u1)
	r02 := complex(y[7], y[8]) * u2
	*rho = [3][3]complex128{
		{complex(y[0], 0), r01, r02},
		{conj(r01), complex(y[1], 0), r12},
		{conj(r02), conj(r12), complex(y[2], 0)},
	}
}

func conj(z complex128) complex128 { return complex(real(z), -imag(z)) }

// rhs evaluates dy/dt at t.
func (s *Solver) rhs(t float64, y, dy *[nY]float64) {
	s.rhsCalls++
	om := s.env.RabiAt(t)
	w := 0.5 * om
	u1, u2 := s.phases(t)
	v := u2 * conj(u1) // e^{i(φ2−φ1)}

	p0, p1, p2 := y[0], y[1], y[2]
	c01 := complex(y[3], y[4])
	c12 := complex(y[5], y[6])
	c02 := complex(y[7], y[8])

	// Interaction-picture coupling Ṽ_01 = −k01·w·e^{−iφ1}, Ṽ_12 = −k12·w·e^{−i(φ2−φ1)}.
	v01 := complex(-s.k01*w, 0) * conj(u1)
	v12 := complex(-s.k12*w, 0) * conj(v)
	v10, v21 := conj(v01), conj(v12)
	// dρ̃/dt = −i[Ṽ, ρ̃] (Ṽ has zero diagonal and no 0–2 element).
	// (Ṽρ̃)_jk rows:
	//   row0: v01·ρ1k ; row1: v10·ρ0k + v12·ρ2k ; row2: v21·ρ1k
	c10, c21, c20 := conj(c01), conj(c12), conj(c02)
	vr00 := v01 * c10
	vr01 := v01 * complex(p1, 0)
	vr02 := v01 * c12
	vr11 := v10*c01 + v12*c21
	vr12 := v10*c02 + v12*complex(p2, 0)
	vr22 := v21 * c12
	vr10 := v10*complex(p0, 0) + v12*c20
	vr20 := v21 * c10
	vr21 := v21 * complex(p1, 0)
	mi := complex(0, -1)
	// dρ_jk = −i((Ṽρ̃)_jk − conj((Ṽρ̃)_kj))
	d00 := 2 * imag(vr00)
	d11 := 2 * imag(vr11)
	d22 := 2 * imag(vr22)
	d01 := mi * (vr01 - conj(vr10))
	d12 := mi * (vr12 - conj(vr21))
	d02 := mi * (vr02 - conj(vr20))

	// Radiative decay (Lindblad, same form in the interaction picture).
	d00 += s.g1 * p1
	d11 += -s.g1*p1 + s.g2*p2
	d22 -= s.g2 * p2
	d01 -= complex(0.5*s.g1, 0) * c01
	d12 -= complex(0.5*(s.g1+s.g2), 0) * c12
	d02 -= complex(0.5*s.g2, 0) * c02

	if s.bath && om > rabiFloorRadPS {
		var h [3][3]float64
		var e [3]float64
		vec := &s.vWarm
		h[1][1] = s.e1 + s.s1*t
		h[2][2] = s.e2 + s.s2*t
		h[0][1], h[1][0] = -s.k01*w, -s.k01*w
		h[1][2], h[2][1] = -s.k12*w, -s.k12*w
		symEig3Warm(&h, &e, vec)
		// lab-frame ρ
		r01 := c01 * u1
		r12 := c12 * v
		r02 := c02 * u2
		rho := [3][3]complex128{
			{complex(p0, 0), r01, r02},
			{conj(r01), complex(p1, 0), r12},
			{conj(r02), conj(r12), complex(p2, 0)},
		}
		var re, dre, dl [3][3]complex128
		var a [3][3]float64
		// A = Vᵀ·S·V with S = diag(0, 1, 2); ρ_eig = Vᵀ·ρ·V.
		for i := range 3 {
			for j := i; j < 3; j++ {
				a[i][j] = vec[1][i]*vec[1][j] + 2*vec[2][i]*vec[2][j]
				a[j][i] = a[i][j]
			}
		}
		transformToEig(vec, &rho, &re)
		redfieldEig(&s.sp, &e, &a, &re, &dre)
		transformFromEig(vec, &dre, &dl)
		d00 += real(dl[0][0])
		d11 += real(dl[1][1])
		d22 += real(dl[2][2])
		d01 += dl[0][1] * conj(u1)
		d12 += dl[1][2] * conj(v)
		d02 += dl[0][2] * conj(u2)
	}

	dy[0], dy[1], dy[2] = d00, d11, d22
	dy[3], dy[4] = real(d01), imag(d01)
	dy[5], dy[6] = real(d12), imag(d12)
	dy[7], dy[8] = real(d02), imag(d02)
	dy[9] = s.g1 * p1
	dy[10] = s.g2 * p2
}

// transformToEig sets out = Vᵀ·m·V for Hermitian m and real orthogonal V.
func transformToEig(v *[3][3]float64, m, out *[3][3]complex128) {
	var t [3][3]complex128 // m·V
	for i := range 3 {
		for j := range 3 {
			t[i][j] = scale(m[i][0], v[0][j]) + scale(m[i][1], v[1][j]) + scale(m[i][2], v[2][j])
		}
	}
	for i := range 3 {
		for j := i; j < 3; j++ {
			z := scale(t[0][j], v[0][i]) + scale(t[1][j], v[1][i]) + scale(t[2][j], v[2][i])
			out[i][j] = z
			out[j][i] = conj(z)
		}
	}
}

// transformFromEig sets out = V·m·Vᵀ for Hermitian m and real orthogonal V.
func transformFromEig(v *[3][3]float64, m, out *[3][3]complex128) {
	var t [3][3]complex128 // m·Vᵀ
	for i := range 3 {
		for j := range 3 {
			t[i][j] = scale(m[i][0], v[j][0]) + scale(m[i][1], v[j][1]) + scale(m[i][2], v[j][2])
		}
	}
	for i := range 3 {
		for j := i; j < 3; j++ {
			z := scale(t[0][j], v[i][0]) + scale(t[1][j], v[i][1]) + scale(t[2][j], v[i][2])
			out[i][j] = z
			out[j][i] = conj(z)
		}
	}
}

func scale(z complex128, r float64) complex128 { return complex(real(z)*r, imag(z)*r) }

// dopNonzero lists, for each stage i, the j < i with a_ij ≠ 0.
var dopNonzero = func() (rows [12][]int) {
	for i := range 12 {
		for j := range i {
			if dopA[i][j] != 0 {
				rows[i] = append(rows[i], j)
			}
		}
	}
	return rows
}()

// integrate advances s.y from t0 to t1 with DOP853 steps (12 evaluations of
// the right-hand side per step) and Hairer's step-size rule for it: the
// combined 5th/3rd-order error estimate, exponent 1/8, growth at most 6× and
// shrink at most 3× a step, no growth right after a rejection.
func (s *Solver) integrate(t0, t1, maxStep, tol float64) error {
	if !(maxStep > 0) || maxStep > t1-t0 {
		maxStep = t1 - t0
	}
	const (
		safe    = 0.9
		expo    = 1.0 / 8
		growMax = 6.0
		shrink  = 3.0
	)
	y, yn, yt, k := &s.y, &s.ynew, &s.yt, &s.k
	t := t0
	h := min(maxStep, 1e-3*(t1-t0))
	rejected := false
	s.rhs(t, y, &k[0])
	for {
		if s.steps+s.rejects >= maxSteps {
			return fmt.Errorf("at t = %.3f ps after %d steps: %w", t, s.steps, ErrTooManySteps)
		}
		last := false
		if t+1.01*h >= t1 {
			h = t1 - t
			last = true
		}
		for i := 1; i < 12; i++ {
			row := &dopA[i]
			*yt = *y
			for _, j := range dopNonzero[i] {
				a, kj := h*row[j], &k[j]
				for q := range nY {
					yt[q] += a * kj[q]
				}
			}
			s.rhs(t+dopC[i]*h, yt, &k[i])
		}
		var e5, e3 float64
		for q := range nY {
			var b, d5, d3 float64
			for j := range 12 {
				kj := k[j][q]
				b += dopB[j] * kj
				d5 += dopE5[j] * kj
				d3 += dopE3[j] * kj
			}
			yn[q] = y[q] + h*b
			sc := tol + tol*math.Max(math.Abs(y[q]), math.Abs(yn[q]))
			d5 /= sc
			d3 /= sc
			e5 += d5 * d5
			e3 += d3 * d3
		}
		var errN float64
		if e5 != 0 || e3 != 0 {
			errN = h * e5 / math.Sqrt((e5+0.01*e3)*nY)
		}
		if math.IsNaN(errN) {
			return fmt.Errorf("at t = %.3f ps: error estimate is NaN", t)
		}
		fac := math.Pow(errN, expo) / safe
		if errN <= 1 {
			s.steps++
			if last {
				t = t1
			} else {
				t += h
			}
			*y = *yn
			if s.bath {
				// rounding in the warm-started rotations must not pile up
				orthonormalise(&s.vWarm)
			}
			if last {
				return nil
			}
			s.rhs(t, y, &k[0])
			hNew := h / math.Max(1/growMax, math.Min(shrink, fac))
			if rejected {
				hNew = math.Min(hNew, h)
			}
			rejected = false
			h = math.Min(hNew, maxStep)
		} else {
			s.rejects++
			rejected = true
			h /= math.Min(shrink, fac)
			if t+h == t {
				return fmt.Errorf("at t = %.3f ps: step size underflow", t)
			}
		}
	}
}
