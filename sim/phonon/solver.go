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
// wings of the pulse. The Redfield term is the secular tensor of QuTiP's
// brmesolve in the instantaneous eigenbasis of the lab-frame H(t) — the same
// construction as brmesolve, which also keeps the coherent part and the
// Lindblad radiative decay exact and adds the Redfield term in that basis.
//
// Where the cost goes, and what keeps it low:
//   - Everything that depends on t only (Ω, the phase factors, the
//     eigen-decomposition of H(t), the bath rates) is computed once per stage
//     time (coef, coefAt), and the last stage of a step, at t+h, is the first
//     of the next.
//   - H(t) is a ladder matrix (zero G energy, real couplings on two links),
//     diagonalised in closed form (ladderEig), with Jacobi (symEig3) only
//     near exact crossings.
//   - When no transition frequencies coincide — almost always — the secular
//     tensor is Pauli rates plus the decay of each coherence; it is applied in
//     the lab frame as Σ_a q_a·P_a − ½{M, ρ} (pauliLab), without taking ρ to
//     the eigenbasis and back. Its 42 coefficients are sums over projectors,
//     smooth in t, so a step computes them at five of its twelve stage times
//     and interpolates the other seven, behind a per-step guard
//     (stageCoefs); near coincidences use the tensor written out.
//   - The DOP853 stage sums are written out over the tableau's non-zeros
//     (step.go).
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
	gauss          bool    // env is a model.Pulse: Ω = peak·exp(−t²·inv2Tau2), inlined
	peak, inv2Tau2 float64 // of that pulse
	e1, s1, e2, s2 float64 // diagonal of H: E_j + S_j·t, rad/ps
	k01, k12       float64 // couplings of Ω/2 on the two links
	g1, g2         float64 // radiative decay X→G, XX→X, 1/ps
	bath           bool
	sp             spectrum

	// integrator
	k           [12][nY]float64
	cf          [12]coef // the coefficients at the 12 stage times of a step
	y, ynew, yt [nY]float64
	steps       int
	rejects     int
	rhsCalls    int
	interpSteps int  // steps whose Redfield term was interpolated
	spanSteps   int  // of those, steps interpolated over nodes of two steps
	exactSets   int  // coefficient sets with the Redfield term computed exactly
	interpolate bool // interpolate the Redfield term where the guard allows
	// the previous accepted step: its length and the Pauli form at its
	// stage times 0 and c9, when both were in that form (havePrev)
	havePrev     bool
	prevH        float64
	prevA, prevB [nRF]float64
}

// NewSolver returns a solver ready for use.
func NewSolver() *Solver { return &Solver{plain: model.NewSolver(), interpolate: true} }

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
	s.gauss = false
	if pu, ok := l.Envelope.(model.Pulse); ok {
		// the same expression as model.Pulse.RabiAt, without the interface call
		tau := pu.TauPS()
		s.gauss, s.peak, s.inv2Tau2 = true, pu.PeakRabi(), 1/(2*tau*tau)
	}
	s.e1, s.s1 = l.EnergyRadPS[1], l.SweepRadPS2[1]
	s.e2, s.s2 = l.EnergyRadPS[2], l.SweepRadPS2[2]
	s.k01, s.k12 = l.Coupling[0], l.Coupling[1]
	s.g1, s.g2 = l.DecayPerPS[0], l.DecayPerPS[1]
	s.bath = b.Active()
	if s.bath {
		s.sp = newSpectrum(b)
	}
	s.steps, s.rejects, s.rhsCalls, s.interpSteps, s.spanSteps, s.exactSets = 0, 0, 0, 0, 0, 0
	s.havePrev = false
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

// coef holds everything the right-hand side needs at one time t that does not
// depend on the state: Ω(t)/2, the phase factors and, with the bath on, the
// eigen-decomposition of H(t) and the secular Redfield rates in it. The
// integrator computes it once per stage time, and the last stage of a step
// (at t+h) serves as the first stage of the next.
type coef struct {
	w        float64    // Ω(t)/2
	u1, u2   complex128 // e^{iφ1}, e^{iφ2}
	v        complex128 // e^{i(φ2−φ1)}
	redfield int        // redfieldOff, redfieldPauli or redfieldGeneral
	// Pauli form (see pauliLab): rf[6a:6a+6] are the elements (00, 11, 22,
	// 01, 12, 02) of the projector P_a = v_a·v_aᵀ on eigenstate a (ascending
	// energy) for a = 0, 1 (P_2 = 1 − P_0 − P_1), rf[12:18] the rates 1→0,
	// 2→0, 0→1, 2→1, 0→2, 1→2. The
	// eigenvalues of a ladder with both couplings non-zero are distinct, so
	// this order is kept along t, and projectors are free of the signs of
	// the eigenvectors: rf is smooth in t and can be interpolated.
	rf [nRF]float64
	// general secular rule: eigenvectors, eigenvalues, S in the eigenbasis,
	// Γ, cutoff
	vec  [3][3]float64
	e    [3]float64
	a, g [3][3]float64
	cut  float64
}

// nRF is the number of reals of the Pauli form of the Redfield term.
const nRF = 18

// nProj is the number of projector elements at the start of coef.rf.
const nProj = 12

const (
	redfieldOff = iota
	redfieldPauli
	redfieldGeneral
)

// coherentAt fills the coherent part of c (Ω/2 and the phase factors) for
// time t and returns Ω(t).
func (s *Solver) coherentAt(t float64, c *coef) float64 {
	var om float64
	if s.gauss {
		om = s.peak * math.Exp(-t*t*s.inv2Tau2)
	} else {
		om = s.env.RabiAt(t)
	}
	c.w = 0.5 * om
	c.u1, c.u2 = s.phases(t)
	c.v = c.u2 * conj(c.u1)
	return om
}

// coefAt fills c for time t.
func (s *Solver) coefAt(t float64, c *coef) {
	om := s.coherentAt(t, c)
	c.redfield = redfieldOff
	if !s.bath || !(om > rabiFloorRadPS) {
		return
	}
	s.exactSets++
	vec := &c.vec
	ladderEig(s.e1+s.s1*t, s.e2+s.s2*t, -s.k01*c.w, -s.k12*c.w, &c.e, vec)
	// A = Vᵀ·S·V with S = diag(0, 1, 2).
	a := &c.a
	for i := range 3 {
		for j := i; j < 3; j++ {
			a[i][j] = vec[1][i]*vec[1][j] + 2*vec[2][i]*vec[2][j]
			a[j][i] = a[i][j]
		}
	}
	e := &c.e
	g := &c.g
	g[0][1], g[1][0] = s.sp.pair(e[0] - e[1])
	g[0][2], g[2][0] = s.sp.pair(e[0] - e[2])
	g[1][2], g[2][1] = s.sp.pair(e[1] - e[2])
	// smallest non-zero gap (exactly equal eigenvalues do not count, as in
	// QuTiP; all equal leaves MaxFloat64)
	dwMin := math.MaxFloat64
	for _, d := range [3]float64{math.Abs(e[0] - e[1]), math.Abs(e[0] - e[2]), math.Abs(e[1] - e[2])} {
		if d != 0 && d < dwMin {
			dwMin = d
		}
	}
	c.cut = SecularCutoff * dwMin
	if nearCoincidence(e, c.cut) {
		c.redfield = redfieldGeneral
		return
	}
	// Pauli rates among the eigenstates and the decay of each coherence
	// (pauliAndDephasing), written for the lab frame: with P_a = v_a·v_aᵀ,
	// p_a = tr(P_a·ρ) and m_a = Σ_k rate[a][k] the secular term is
	// Σ_a (Σ_c rate[c][a]·p_c)·P_a − ½{M, ρ}, M = Σ_a m_a·P_a.
	c.redfield = redfieldPauli
	var rate [3][3]float64 // rate[c][a]: c → a
	for i := range 3 {
		for k := range 3 {
			if k != i {
				rate[i][k] = a[i][k] * a[i][k] * g[i][k]
			}
		}
	}
	// pr[a] = (V0a², V1a², V2a², V0a·V1a, V1a·V2a, V0a·V2a): p_a = pr[a]·x,
	// and P_a = v_a·v_aᵀ has the elements pr[a] (in the order of Q).
	rf := &c.rf
	for k := range 2 {
		v0, v1, v2 := vec[0][k], vec[1][k], vec[2][k]
		pr := rf[6*k : 6*k+6 : 6*k+6]
		pr[0], pr[1], pr[2], pr[3], pr[4], pr[5] = v0*v0, v1*v1, v2*v2, v0*v1, v1*v2, v0*v2
	}
	rf[12], rf[13], rf[14] = rate[1][0], rate[2][0], rate[0][1]
	rf[15], rf[16], rf[17] = rate[2][1], rate[0][2], rate[1][2]
}

// rhs evaluates dy/dt at t.
func (s *Solver) rhs(t float64, y, dy *[nY]float64) {
	var c coef
	s.coefAt(t, &c)
	s.deriv(&c, y, dy)
}

// deriv evaluates dy/dt with the time-dependent coefficients c.
func (s *Solver) deriv(c *coef, y, dy *[nY]float64) {
	s.rhsCalls++
	w := c.w
	u1, u2, v := c.u1, c.u2, c.v

	p0, p1, p2 := y[0], y[1], y[2]
	c01 := complex(y[3], y[4])
	c12 := complex(y[5], y[6])
	c02 := complex(y[7], y[8])

	// Interaction-picture coupling Ṽ_01 = A = −k01·w·e^{−iφ1},
	// Ṽ_12 = B = −k12·w·e^{−i(φ2−φ1)}; dρ̃/dt = −i[Ṽ, ρ̃] written out (Ṽ has
	// zero diagonal and no 0–2 element):
	//
	//	dρ00 = 2 Im(A·ρ01*),  dρ22 = −2 Im(B·ρ12*),  dρ11 = −dρ00 − dρ22,
	//	dρ01 = −i(A·(ρ11 − ρ00) − B*·ρ02),  dρ12 = −i(B·(ρ22 − ρ11) + A*·ρ02),
	//	dρ02 = −i(A·ρ12 − B·ρ01).
	ka, kb := -s.k01*w, -s.k12*w
	ar, ai := ka*real(u1), -ka*imag(u1)
	br, bi := kb*real(v), -kb*imag(v)
	x01r, x01i := y[3], y[4]
	x12r, x12i := y[5], y[6]
	x02r, x02i := y[7], y[8]
	// Im(A·ρ01*) and Im(B·ρ12*)
	ia := ai*x01r - ar*x01i
	ib := bi*x12r - br*x12i
	d00 := 2 * ia
	d22 := -2 * ib
	d11 := -d00 - d22
	// z01 = A·(p1 − p0) − B*·ρ02, dρ01 = −i·z01 = (Im z01, −Re z01)
	q10, q21 := p1-p0, p2-p1
	z01r := ar*q10 - (br*x02r + bi*x02i)
	z01i := ai*q10 - (br*x02i - bi*x02r)
	// z12 = B·(p2 − p1) + A*·ρ02
	z12r := br*q21 + (ar*x02r + ai*x02i)
	z12i := bi*q21 + (ar*x02i - ai*x02r)
	// z02 = A·ρ12 − B·ρ01
	z02r := (ar*x12r - ai*x12i) - (br*x01r - bi*x01i)
	z02i := (ar*x12i + ai*x12r) - (br*x01i + bi*x01r)
	d01 := complex(z01i, -z01r)
	d12 := complex(z12i, -z12r)
	d02 := complex(z02i, -z02r)

	// Radiative decay (Lindblad, same form in the interaction picture).
	d00 += s.g1 * p1
	d11 += -s.g1*p1 + s.g2*p2
	d22 -= s.g2 * p2
	d01 -= complex(0.5*s.g1, 0) * c01
	d12 -= complex(0.5*(s.g1+s.g2), 0) * c12
	d02 -= complex(0.5*s.g2, 0) * c02

	if c.redfield != redfieldOff {
		// lab-frame ρ
		r01 := c01 * u1
		r12 := c12 * v
		r02 := c02 * u2
		var dl00, dl11, dl22 float64
		var dl01, dl12, dl02 complex128
		if c.redfield == redfieldPauli {
			dl00, dl11, dl22, dl01, dl12, dl02 = pauliLab(&c.rf, p0, p1, p2, r01, r12, r02)
		} else {
			rho := [3][3]complex128{
				{complex(p0, 0), r01, r02},
				{conj(r01), complex(p1, 0), r12},
				{conj(r02), conj(r12), complex(p2, 0)},
			}
			var re, dre, dl [3][3]complex128
			transformToEig(&c.vec, &rho, &re)
			secularLoop(&c.e, &c.a, &c.g, c.cut, &re, &dre)
			transformFromEig(&c.vec, &dre, &dl)
			dl00, dl11, dl22 = real(dl[0][0]), real(dl[1][1]), real(dl[2][2])
			dl01, dl12, dl02 = dl[0][1], dl[1][2], dl[0][2]
		}
		d00 += dl00
		d11 += dl11
		d22 += dl22
		d01 += dl01 * conj(u1)
		d12 += dl12 * conj(v)
		d02 += dl02 * conj(u2)
	}

	dy[0], dy[1], dy[2] = d00, d11, d22
	dy[3], dy[4] = real(d01), imag(d01)
	dy[5], dy[6] = real(d12), imag(d12)
	dy[7], dy[8] = real(d02), imag(d02)
	dy[9] = s.g1 * p1
	dy[10] = s.g2 * p2
}

// pauliLab is the secular Redfield term when no transition frequencies
// coincide (pauliAndDephasing), evaluated in the lab frame without taking ρ
// to the eigenbasis: with P_a = v_a·v_aᵀ, p_a = tr(P_a·ρ) (real, as v_a is
// real) and m_a the total rate out of a,
//
//	dρ = Σ_a (Σ_c rate[c→a]·p_c)·P_a − ½(M·ρ + ρ·M),  M = Σ_a m_a·P_a,
//
// with the projectors and rates of coef.rf. ρ is given by its diagonal p0,
// p1, p2 and upper elements r01, r12, r02; the result likewise.
func pauliLab(rf *[nRF]float64, p0, p1, p2 float64, r01, r12, r02 complex128) (d00, d11, d22 float64, d01, d12, d02 complex128) {
	x0, x1, x2, x3, x4, x5 := p0, p1, p2, 2*real(r01), 2*real(r12), 2*real(r02)
	pa, pb := rf[0:6:6], rf[6:12:12]
	e0 := pa[0]*x0 + pa[1]*x1 + pa[2]*x2 + pa[3]*x3 + pa[4]*x4 + pa[5]*x5
	e1 := pb[0]*x0 + pb[1]*x1 + pb[2]*x2 + pb[3]*x3 + pb[4]*x4 + pb[5]*x5
	e2 := p0 + p1 + p2 - e0 - e1 // P_2 = 1 − P_0 − P_1
	r10, r20, r01r, r21, r02r, r12r := rf[12], rf[13], rf[14], rf[15], rf[16], rf[17]
	q0 := r10*e1 + r20*e2
	q1 := r01r*e0 + r21*e2
	q2 := r02r*e0 + r12r*e1
	o0, o1, o2 := r01r+r02r, r10+r12r, r20+r21 // total rates out
	// Σ_a f_a·P_a = f_2·1 + (f_0 − f_2)·P_0 + (f_1 − f_2)·P_1
	qa, qb, oa, ob := q0-q2, q1-q2, o0-o2, o1-o2
	var q, mm [6]float64
	for i := range 6 {
		q[i] = qa*pa[i] + qb*pb[i]
		mm[i] = oa*pa[i] + ob*pb[i]
	}
	q[0] += q2
	q[1] += q2
	q[2] += q2
	mm[0] += o2
	mm[1] += o2
	mm[2] += o2
	m00, m11, m22, m01, m12, m02 := mm[0], mm[1], mm[2], mm[3], mm[4], mm[5]
	// ½{M, ρ}_jk = ½Σ_l (M_jl·ρ_lk + ρ_jl·M_lk)
	d00 = q[0] - (m00*p0 + m01*real(r01) + m02*real(r02))
	d11 = q[1] - (m11*p1 + m01*real(r01) + m12*real(r12))
	d22 = q[2] - (m22*p2 + m02*real(r02) + m12*real(r12))
	// (M·ρ)_01 + (ρ·M)_01 = m00·r01 + m01·p1 + m02·r21 + p0·m01 + r01·m11 + r02·m21
	d01 = complex(q[3], 0) - 0.5*(scale(r01, m00+m11)+complex(m01*(p0+p1), 0)+scale(conj(r12), m02)+scale(r02, m12))
	// (M·ρ)_12 + (ρ·M)_12 = m10·r02 + m11·r12 + m12·p2 + r10·m02 + p1·m12 + r12·m22
	d12 = complex(q[4], 0) - 0.5*(scale(r02, m01)+scale(r12, m11+m22)+complex(m12*(p1+p2), 0)+scale(conj(r01), m02))
	// (M·ρ)_02 + (ρ·M)_02 = m00·r02 + m01·r12 + m02·p2 + p0·m02 + r01·m12 + r02·m22
	d02 = complex(q[5], 0) - 0.5*(scale(r02, m00+m22)+scale(r12, m01)+complex(m02*(p0+p2), 0)+scale(r01, m12))
	return
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

// Stages whose Redfield term is interpolated. The Pauli form of the term
// (coef.rf) is a smooth function of t on the time scale of the change of
// H(t)'s eigenvectors and gaps, which is long against a step wherever the
// phonons matter. stageCoefs first tries nodes spanning two steps (see
// spanStages: two new exact sets per step). Failing that, it computes the
// term exactly at the stage times 0, c4, c9, c10 and c11 = 1 of the step and
// interpolates it by the quartic through them at the other seven (whose c
// lie in [0.05, 0.66]). The coherent part is exact at every stage. A guard
// decides per step: here the cubic through 0, c4, c10, c11 must reproduce
// the exact value at c9 to rfGuard × the tolerance as an error of the term
// (rfGuardOK); when it does not, or when any node is not in the Pauli form,
// every stage is exact. The quartic's own error is then smaller by about
// (h/T)/4, T the time scale of the term.
var (
	rfNodes  = [5]int{0, 4, 9, 10, 11}
	rfInterp = [7]int{1, 2, 3, 5, 6, 7, 8}
	// rfWeight[i][n]: Lagrange weight of node n at stage rfInterp[i]
	rfWeight [7][5]float64
	// rfGuardW[n]: cubic through nodes 0, 1, 3, 4 evaluated at node 2 (c9)
	rfGuardW [5]float64
)

// rfGuard is the guard's threshold in units of the tolerance (1/ps). An error
// δ of the term over a step h changes the state by about δ·h, against the
// tol per step the step control allows; at 1 the interpolation moves the
// golden cases by at most 2e-9, against the solver's own error of ~4e-7
// (TestInterpolatedRedfield).
const rfGuard = 1.0

func init() {
	lag := func(nodes []int, n int, c float64) float64 {
		w := 1.0
		for _, m := range nodes {
			if m != nodes[n] {
				w *= (c - dopC[m]) / (dopC[nodes[n]] - dopC[m])
			}
		}
		return w
	}
	for i, st := range rfInterp {
		for n := range rfNodes {
			rfWeight[i][n] = lag(rfNodes[:], n, dopC[st])
		}
	}
	g := []int{rfNodes[0], rfNodes[1], rfNodes[3], rfNodes[4]}
	for n, idx := range []int{0, 1, 3, 4} {
		rfGuardW[idx] = lag(g, n, dopC[rfNodes[2]])
	}
}

// stageCoefs fills s.cf[1…11] for the step from t of length h (cf[0] is the
// coefficient set at t). It first tries the nodes that span two steps (the
// previous step's stage times 0 and c9, this step's 0, c9 and 1: two new
// exact sets per step), then the five nodes within the step (four new), and
// computes every stage exactly when neither passes its guard.
func (s *Solver) stageCoefs(t, h, tol float64) {
	cf := &s.cf
	interp := s.bath && s.interpolate && cf[0].redfield == redfieldPauli
	s.coefAt(t+dopC[9]*h, &cf[9])
	s.coefAt(t+dopC[11]*h, &cf[11])
	interp = interp && cf[9].redfield == redfieldPauli && cf[11].redfield == redfieldPauli
	if interp && s.havePrev && s.spanStages(t, h, tol) {
		return
	}
	s.coefAt(t+dopC[4]*h, &cf[4])
	s.coefAt(t+dopC[10]*h, &cf[10])
	ok := interp && cf[4].redfield == redfieldPauli && cf[10].redfield == redfieldPauli
	if ok {
		r0, r1, r2, r3, r4 := &cf[0].rf, &cf[4].rf, &cf[9].rf, &cf[10].rf, &cf[11].rf
		g0, g1, g3, g4 := rfGuardW[0], rfGuardW[1], rfGuardW[3], rfGuardW[4]
		var d [nRF]float64
		for n := range nRF {
			d[n] = g0*r0[n] + g1*r1[n] + g3*r3[n] + g4*r4[n] - r2[n]
		}
		ok = rfGuardOK(&d, r0, r4, tol)
	}
	if !ok {
		for _, i := range rfInterp {
			s.coefAt(t+dopC[i]*h, &cf[i])
		}
		return
	}
	s.interpSteps++
	r0, r1, r2, r3, r4 := &cf[0].rf, &cf[4].rf, &cf[9].rf, &cf[10].rf, &cf[11].rf
	for j, i := range rfInterp {
		c := &cf[i]
		s.coherentAt(t+dopC[i]*h, c)
		c.redfield = redfieldPauli
		w := &rfWeight[j]
		w0, w1, w2, w3, w4 := w[0], w[1], w[2], w[3], w[4]
		for n := range nRF {
			c.rf[n] = w0*r0[n] + w1*r1[n] + w2*r2[n] + w3*r3[n] + w4*r4[n]
		}
	}
}

// spanStages interpolates the Redfield term at stages 1–8 and 10 by the
// quartic through the previous step's stage times 0 and c9 (at t − h' and
// t − 0.4h') and this step's 0, c9 and 1, when the cubic through all but
// the node at t − 0.4h' reproduces it there to rfGuard × tol. It reports
// whether it did.
func (s *Solver) spanStages(t, h, tol float64) bool {
	cf := &s.cf
	rho := s.prevH / h
	x := [5]float64{-rho, -(1 - dopC[9]) * rho, 0, dopC[9], 1}
	r := [5]*[nRF]float64{&s.prevA, &s.prevB, &cf[0].rf, &cf[9].rf, &cf[11].rf}
	// guard: cubic through nodes 0, 2, 3, 4 at x[1]
	var gw [5]float64
	for _, n := range [4]int{0, 2, 3, 4} {
		w := 1.0
		for _, m := range [4]int{0, 2, 3, 4} {
			if m != n {
				w *= (x[1] - x[m]) / (x[n] - x[m])
			}
		}
		gw[n] = w
	}
	var d [nRF]float64
	for n := range nRF {
		d[n] = gw[0]*r[0][n] + gw[2]*r[2][n] + gw[3]*r[3][n] + gw[4]*r[4][n] - r[1][n]
	}
	if !rfGuardOK(&d, r[2], r[4], tol) {
		return false
	}
	s.interpSteps++
	s.spanSteps++
	// Lagrange weights w_n(c) = Π_{m≠n}(c − x_m) / Π_{m≠n}(x_n − x_m)
	var inv [5]float64
	for n := range 5 {
		den := 1.0
		for m := range 5 {
			if m != n {
				den *= x[n] - x[m]
			}
		}
		inv[n] = 1 / den
	}
	for _, i := range spanInterp {
		ci := dopC[i]
		d0, d1, d2, d3, d4 := ci-x[0], ci-x[1], ci-x[2], ci-x[3], ci-x[4]
		d01, d34 := d0*d1, d3*d4
		w := [5]float64{
			d1 * d2 * d34 * inv[0],
			d0 * d2 * d34 * inv[1],
			d01 * d34 * inv[2],
			d01 * d2 * d4 * inv[3],
			d01 * d2 * d3 * inv[4],
		}
		c := &cf[i]
		s.coherentAt(t+ci*h, c)
		c.redfield = redfieldPauli
		r0, r1, r2, r3, r4 := r[0], r[1], r[2], r[3], r[4]
		for n := range nRF {
			c.rf[n] = w[0]*r0[n] + w[1]*r1[n] + w[2]*r2[n] + w[3]*r3[n] + w[4]*r4[n]
		}
	}
	return true
}

// rfGuardOK reports whether the guard's differences d (interpolant minus
// exact value at the check node) are within rfGuard × tol as errors of the
// Redfield term: a rate's difference as it is (1/ps), a projector element's
// times the largest rate at the nodes a and b.
func rfGuardOK(d, a, b *[nRF]float64, tol float64) bool {
	var rmax float64
	for n := nProj; n < nRF; n++ {
		rmax = max(rmax, math.Abs(a[n]), math.Abs(b[n]))
	}
	lim := rfGuard * tol
	for n := range nProj {
		if !(math.Abs(d[n])*rmax <= lim) {
			return false
		}
	}
	for n := nProj; n < nRF; n++ {
		if !(math.Abs(d[n]) <= lim) {
			return false
		}
	}
	return true
}

// spanInterp are the stages spanStages interpolates.
var spanInterp = [9]int{1, 2, 3, 4, 5, 6, 7, 8, 10}

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
	y, yn, yt, k, cf := &s.y, &s.ynew, &s.yt, &s.k, &s.cf
	t := t0
	h := min(maxStep, 1e-3*(t1-t0))
	rejected := false
	s.coefAt(t, &cf[0])
	s.deriv(&cf[0], y, &k[0])
	for {
		if s.steps+s.rejects >= maxSteps {
			return fmt.Errorf("at t = %.3f ps after %d steps: %w", t, s.steps, ErrTooManySteps)
		}
		last := false
		if t+1.01*h >= t1 {
			h = t1 - t
			last = true
		}
		// The coefficients do not depend on the state: all stage times first.
		s.stageCoefs(t, h, tol)
		for i := 1; i < 12; i++ {
			stageArg(i, h, y, yt, k)
			s.deriv(&cf[i], yt, &k[i])
		}
		errN := combine(h, tol, y, yn, k)
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
			if last {
				return nil
			}
			s.havePrev = cf[0].redfield == redfieldPauli && cf[9].redfield == redfieldPauli
			if s.havePrev {
				s.prevH, s.prevA, s.prevB = h, cf[0].rf, cf[9].rf
			}
			// dopC[11] = 1: the last stage was at t+h, the new t
			cf[0] = cf[11]
			s.deriv(&cf[0], y, &k[0])
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
