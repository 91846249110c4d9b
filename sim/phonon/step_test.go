package phonon

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
	"testing"
)

// TestStageSumsMatchTableau: the written-out stage sums of step.go use
// exactly the non-zero a_ij of the tableau, and b, e5 and e3 vanish on the
// stages combine leaves out.
func TestStageSumsMatchTableau(t *testing.T) {
	for i := 1; i < 12; i++ {
		var want []int
		for j := range i {
			if dopA[i][j] != 0 {
				want = append(want, j)
			}
		}
		got := stageCols[i]
		if len(got) != len(want) {
			t.Fatalf("stage %d: columns %v, tableau %v", i, got, want)
		}
		for n := range got {
			if got[n] != want[n] {
				t.Fatalf("stage %d: columns %v, tableau %v", i, got, want)
			}
		}
		// stageArg against the sum over the tableau row
		var y, yt [nY]float64
		var k [12][nY]float64
		for q := range nY {
			y[q] = float64(q) + 0.5
			for j := range 12 {
				k[j][q] = float64(j*nY+q)*0.01 - 0.3
			}
		}
		const h = 0.37
		stageArg(i, h, &y, &yt, &k)
		for q := range nY {
			w := y[q]
			for j := range i {
				w += h * dopA[i][j] * k[j][q]
			}
			if d := yt[q] - w; d > 1e-12 || d < -1e-12 {
				t.Fatalf("stage %d component %d: %g, tableau sum %g", i, q, yt[q], w)
			}
		}
	}
	for j := 1; j <= 4; j++ {
		if dopB[j] != 0 || dopE5[j] != 0 || dopE3[j] != 0 {
			t.Errorf("stage %d: b %g e5 %g e3 %g, combine assumes 0", j, dopB[j], dopE5[j], dopE3[j])
		}
	}
}

// TestLadderEig checks the closed-form eigen-decomposition of the ladder
// matrix: H·v = λ·v to 1e-13 of ‖H‖, V orthonormal, λ ascending, on random
// ladders over six decades of coupling (down to the near crossings of the
// pulse's wings, where it hands over to Jacobi) and against symEig3's
// eigenvalues.
func TestLadderEig(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	type lad struct{ d1, d2, a, b float64 }
	cases := []lad{{3.1, 0, -1.4, -1.4}, {0, 0, 0, 0}, {1, 1, 0, 0}, {2, -1, 1e-9, 1e-9}, {1e-7, 3, -1e-4, -1e-4}, {4, 4 + 1e-9, -1e-6, -1e-6}, {0, 0, 1, 0}}
	for range 2000 {
		s := math.Pow(10, float64(rng.IntN(7)-5))
		cases = append(cases, lad{5 * rng.NormFloat64(), 5 * rng.NormFloat64(), s * rng.NormFloat64(), s * rng.NormFloat64()})
	}
	for _, c := range cases {
		h := [3][3]float64{{0, c.a, 0}, {c.a, c.d1, c.b}, {0, c.b, c.d2}}
		var e, ej [3]float64
		var v, vj [3][3]float64
		ladderEig(c.d1, c.d2, c.a, c.b, &e, &v)
		hh := h
		symEig3(&hh, &ej, &vj)
		ej[0], ej[1], ej[2] = sort3(ej[0], ej[1], ej[2])
		norm := math.Max(math.Abs(c.d1), math.Abs(c.d2)) + math.Abs(c.a) + math.Abs(c.b)
		if !(e[0] <= e[1] && e[1] <= e[2]) {
			t.Fatalf("%+v: eigenvalues %v not ascending", c, e)
		}
		for k := range 3 {
			if d := math.Abs(e[k] - ej[k]); d > 1e-13*norm+1e-300 {
				t.Fatalf("%+v: λ%d = %.17g, Jacobi %.17g", c, k, e[k], ej[k])
			}
			for i := range 3 {
				hv := h[i][0]*v[0][k] + h[i][1]*v[1][k] + h[i][2]*v[2][k]
				if d := math.Abs(hv - e[k]*v[i][k]); d > 1e-13*norm+1e-300 {
					t.Fatalf("%+v: residual %.2e for eigenpair %d", c, d, k)
				}
			}
			for l := range 3 {
				dot := v[0][k]*v[0][l] + v[1][k]*v[1][l] + v[2][k]*v[2][l]
				want := 0.0
				if k == l {
					want = 1
				}
				if math.Abs(dot-want) > 1e-13 {
					t.Fatalf("%+v: vᵀv[%d][%d] = %g", c, k, l, dot)
				}
			}
		}
	}
}

// TestInterpolatedRedfield: interpolating the Redfield term between exactly
// computed stage times (stageCoefs, spanStages) changes no golden case by
// more than 1e-8, far below the solver's own error (~4e-7 at the default
// tolerance), and is actually used on most steps of the plateau cases.
func TestInterpolatedRedfield(t *testing.T) {
	g := loadGolden(t)
	exact, interp := NewSolver(), NewSolver()
	exact.interpolate = false
	var worst float64
	for _, c := range g.Cases {
		p, b := c.params()
		l := p.Ladder()
		a, err := exact.solveLadder(&l, &b, DefaultTolerance)
		if err != nil {
			t.Fatal(err)
		}
		r, err := interp.solveLadder(&l, &b, DefaultTolerance)
		if err != nil {
			t.Fatal(err)
		}
		d := maxDiff(a.result(), r.result())
		worst = max(worst, d)
		if d > 1e-8 {
			t.Errorf("%s: interpolated %+v, exact %+v (|d| %.1e > 1e-8)", c.Name, r.result(), a.result(), d)
		}
		if exact.interpSteps != 0 {
			t.Errorf("%s: %d interpolated steps with interpolation off", c.Name, exact.interpSteps)
		}
		if c.Name == "plus20_a8_4K2" && interp.interpSteps < interp.steps/2 {
			t.Errorf("%s: interpolated on %d of %d steps, want most", c.Name, interp.interpSteps, interp.steps)
		}
	}
	t.Logf("largest change from interpolation %.1e", worst)
}

// TestPauliLabMatchesTensor: the lab-frame form of the secular term
// (coefAt's K and M, applied by pauliLab) equals the tensor applied in the
// eigenbasis (redfieldEig between transformToEig and transformFromEig) for
// random density matrices at times across the demo pulse.
func TestPauliLabMatchesTensor(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	p := demoAt(20, 10)
	l := p.Ladder()
	b := DemoBath()
	s := NewSolver()
	s.setup(&l, &b)
	checked := 0
	for n := range 400 {
		tt := l.StartPS + (l.EndPS-l.StartPS)*float64(n)/400
		var c coef
		s.coefAt(tt, &c)
		if c.redfield != redfieldPauli {
			continue
		}
		var rho [3][3]complex128
		for i := range 3 {
			rho[i][i] = complex(rng.Float64(), 0)
			for j := i + 1; j < 3; j++ {
				rho[i][j] = complex(rng.NormFloat64(), rng.NormFloat64())
				rho[j][i] = conj(rho[i][j])
			}
		}
		var re, dre, want [3][3]complex128
		transformToEig(&c.vec, &rho, &re)
		redfieldEig(&s.sp, &c.e, &c.a, &re, &dre)
		transformFromEig(&c.vec, &dre, &want)
		d00, d11, d22, d01, d12, d02 := pauliLab(&c.rf, real(rho[0][0]), real(rho[1][1]), real(rho[2][2]), rho[0][1], rho[1][2], rho[0][2])
		got := [6]complex128{complex(d00, 0), complex(d11, 0), complex(d22, 0), d01, d12, d02}
		ref := [6]complex128{want[0][0], want[1][1], want[2][2], want[0][1], want[1][2], want[0][2]}
		var scale float64
		for _, z := range ref {
			scale = math.Max(scale, cmplxAbs(z))
		}
		for k := range got {
			if d := cmplxAbs(got[k] - ref[k]); d > 1e-12*scale+1e-15 {
				t.Fatalf("t %.3f ps element %d: lab form %v, tensor %v", tt, k, got[k], ref[k])
			}
		}
		checked++
	}
	if checked < 300 {
		t.Errorf("only %d of 400 times in the Pauli form", checked)
	}
}

// TestDerivMatchesMatrixForm: the written-out right-hand side without the
// bath equals −i[Ṽ, ρ̃] + Σ_k (L_k ρ̃ L_k† − ½{L_k†L_k, ρ̃}) evaluated with
// plain 3×3 complex matrix products (Ṽ_01 = −k01·Ω/2·e^{−iφ1},
// Ṽ_12 = −k12·Ω/2·e^{−i(φ2−φ1)}, L_1 = √γ1|0⟩⟨1|, L_2 = √γ2|1⟩⟨2|), for
// random states and times.
func TestDerivMatchesMatrixForm(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 10))
	p := demoAt(15, 7)
	l := p.Ladder()
	s := NewSolver()
	s.setup(&l, nil)
	mul := func(a, b [3][3]complex128) (c [3][3]complex128) {
		for i := range 3 {
			for j := range 3 {
				for k := range 3 {
					c[i][j] += a[i][k] * b[k][j]
				}
			}
		}
		return
	}
	dag := func(a [3][3]complex128) (c [3][3]complex128) {
		for i := range 3 {
			for j := range 3 {
				c[i][j] = conj(a[j][i])
			}
		}
		return
	}
	for range 300 {
		tt := l.StartPS + (l.EndPS-l.StartPS)*rng.Float64()
		var c coef
		s.coefAt(tt, &c)
		var y, dy [nY]float64
		for q := range 9 {
			y[q] = rng.NormFloat64()
		}
		s.deriv(&c, &y, &dy)
		rho := [3][3]complex128{
			{complex(y[0], 0), complex(y[3], y[4]), complex(y[7], y[8])},
			{complex(y[3], -y[4]), complex(y[1], 0), complex(y[5], y[6])},
			{complex(y[7], -y[8]), complex(y[5], -y[6]), complex(y[2], 0)},
		}
		w := 0.5 * l.Envelope.RabiAt(tt)
		u1 := cmplx.Exp(complex(0, l.Phase(1, tt)))
		v := cmplx.Exp(complex(0, l.Phase(2, tt)-l.Phase(1, tt)))
		var vt [3][3]complex128
		vt[0][1] = complex(-l.Coupling[0]*w, 0) * conj(u1)
		vt[1][2] = complex(-l.Coupling[1]*w, 0) * conj(v)
		vt[1][0], vt[2][1] = conj(vt[0][1]), conj(vt[1][2])
		a, b := mul(vt, rho), mul(rho, vt)
		var want [3][3]complex128
		for i := range 3 {
			for j := range 3 {
				want[i][j] = complex(0, -1) * (a[i][j] - b[i][j])
			}
		}
		for k, g := range l.DecayPerPS {
			var lk [3][3]complex128
			lk[k][k+1] = complex(math.Sqrt(g), 0)
			lr := mul(mul(lk, rho), dag(lk))
			ll := mul(dag(lk), lk)
			x, z := mul(ll, rho), mul(rho, ll)
			for i := range 3 {
				for j := range 3 {
					want[i][j] += lr[i][j] - 0.5*(x[i][j]+z[i][j])
				}
			}
		}
		got := [9]float64{dy[0], dy[1], dy[2], dy[3], dy[4], dy[5], dy[6], dy[7], dy[8]}
		ref := [9]float64{real(want[0][0]), real(want[1][1]), real(want[2][2]),
			real(want[0][1]), imag(want[0][1]), real(want[1][2]), imag(want[1][2]), real(want[0][2]), imag(want[0][2])}
		for q := range got {
			if d := math.Abs(got[q] - ref[q]); d > 1e-12*(1+math.Abs(ref[q])) {
				t.Fatalf("t %.3f ps component %d: %.15g, matrix form %.15g", tt, q, got[q], ref[q])
			}
		}
	}
}
