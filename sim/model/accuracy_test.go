package model

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestDefaultToleranceAccuracy: the default tolerance gives populations and
// yields within 1e-6 of a run at tolerance 1e-12, over random points of the
// demo dot's range (areas to 14π, GDD ±30 ps², detunings ±1 meV, with and
// without decay).
func TestDefaultToleranceAccuracy(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	s := NewSolver()
	var worst float64
	var worstP Params
	n := 150
	if testing.Short() {
		n = 30
	}
	for i := range n {
		p := DemoParams()
		p.FWHMPS = 1.5 + 3*rng.Float64()
		p.GDDPS2 = -30 + 60*rng.Float64()
		p.AreaPi = 14 * rng.Float64()
		p.DetuningMeV = -1 + 2*rng.Float64()
		if i%3 == 0 {
			p.XLifetimePS, p.XXLifetimePS = 0, 0
		}
		r, err := s.Solve(p)
		if err != nil {
			t.Fatal(err)
		}
		p.Tolerance = 1e-12
		ref, err := s.Solve(p)
		if err != nil {
			t.Fatal(err)
		}
		for _, d := range []float64{r.G - ref.G, r.X - ref.X, r.XX - ref.XX, r.NX - ref.NX, r.NXX - ref.NXX} {
			if math.Abs(d) > worst {
				worst, worstP = math.Abs(d), p
			}
		}
	}
	t.Logf("largest |default − tol 1e-12| = %.2g at %+v", worst, worstP)
	if worst > 1e-6 {
		t.Errorf("default tolerance: error %.2g > 1e-6 at %+v", worst, worstP)
	}
}

// TestSolveAllocs: a solve allocates nothing (the step loop included).
func TestSolveAllocs(t *testing.T) {
	s := NewSolver()
	p := DemoParams()
	p.GDDPS2, p.AreaPi = 12, 6
	if a := testing.AllocsPerRun(20, func() {
		if _, err := s.Solve(p); err != nil {
			t.Fatal(err)
		}
	}); a != 0 {
		t.Errorf("Solve allocates %.1f times per call, want 0", a)
	}
}

// TestToleranceConvergence: on a problem with a closed-form answer (a
// resonant constant drive, P_e(t) = sin²(Ω·t/2), with a detuned level 2
// coupled in so that all components move) the error falls with the
// tolerance and stays within 100× of it.
func TestToleranceConvergence(t *testing.T) {
	s := NewSolver()
	const om, tEnd = 1.3, 40.0
	want := math.Pow(math.Sin(om*tEnd/2), 2)
	prev := math.Inf(1)
	for _, tol := range []float64{1e-5, 1e-7, 1e-9, 1e-11} {
		l := Ladder{
			Coupling: [2]float64{1, 0},
			Envelope: constEnvelope(om),
			StartPS:  0,
			EndPS:    tEnd,
		}
		r, err := s.SolveLadder(&l, tol)
		if err != nil {
			t.Fatal(err)
		}
		e := math.Abs(real(r.Rho[1][1]) - want)
		t.Logf("tolerance %g: error %.2g in %d steps", tol, e, r.Steps)
		if e > 100*tol || (e > 1e-13 && e >= prev) {
			t.Errorf("tolerance %g: error %.2g (previous %.2g)", tol, e, prev)
		}
		prev = e
	}
}

// TestDensityMatchesStateVector: the density-matrix path (any non-zero
// decay) and the state-vector path (no decay) agree when the decay is
// negligible, from a superposition start, on the full three-level dot with
// chirp and detuning; the whole density matrix is compared.
func TestDensityMatchesStateVector(t *testing.T) {
	p := DemoParams()
	p.GDDPS2, p.AreaPi, p.DetuningMeV = -7, 4.5, 0.3
	l := p.Ladder()
	l.DecayPerPS = [2]float64{}
	l.Initial = [3]complex128{complex(0.6, 0), complex(0, 0.48), complex(0.64, 0)}
	s := NewSolver()
	vec, err := s.SolveLadder(&l, 1e-11)
	if err != nil {
		t.Fatal(err)
	}
	l.DecayPerPS = [2]float64{1e-13, 1e-13}
	den, err := s.SolveLadder(&l, 1e-11)
	if err != nil {
		t.Fatal(err)
	}
	for i := range 3 {
		for j := range 3 {
			if d := cmplxAbs(vec.Rho[i][j] - den.Rho[i][j]); d > 1e-8 {
				t.Errorf("ρ[%d][%d]: state vector %v, density matrix %v", i, j, vec.Rho[i][j], den.Rho[i][j])
			}
		}
	}
	var tr float64
	for i := range 3 {
		tr += real(den.Rho[i][i])
	}
	if math.Abs(tr-1) > 1e-9 {
		t.Errorf("trace %v", tr)
	}
}

func cmplxAbs(z complex128) float64 { return math.Hypot(real(z), imag(z)) }
