package phonon

import "math"

// SecularCutoff is the secular rule of PHYSICS.md §7 (and of QuTiP's
// brmesolve): a tensor element R_ab,cd is kept when
// |ω_ab − ω_cd| < SecularCutoff × the smallest non-zero eigenvalue gap.
const SecularCutoff = 0.1

// redfieldEig adds the secular Bloch–Redfield term to out, all in the
// instantaneous eigenbasis of H(t): e are the eigenvalues (rad/ps), a is the
// coupling operator S in that basis (real symmetric, as H is real), rho the
// density matrix in that basis. The tensor is the one of Breuer & Petruccione
// (2002), ch. 3, with real rates only (no Lamb shift), in the form QuTiP's
// brmesolve evaluates it:
//
//	R_ab,cd = ½·A_ac·A_db·(Γ_ca + Γ_db) − ½·δ_ac·Σ_k A_dk·A_kb·Γ_dk − ½·δ_bd·Σ_k A_ak·A_kc·Γ_ck
//
// with Γ_kl = S(ω_kl), ω_kl = E_k − E_l (k → l lowers the energy when ω > 0),
// and dρ_ab/dt = Σ_cd R_ab,cd·ρ_cd over the kept elements. For populations it
// is the Pauli master equation with rates |A_lk|²·S(ω_kl) for k → l.
func redfieldEig(sp *spectrum, e *[3]float64, a *[3][3]float64, rho *[3][3]complex128, out *[3][3]complex128) {
	var g [3][3]float64 // Γ_kl
	g[0][1], g[1][0] = sp.pair(e[0] - e[1])
	g[0][2], g[2][0] = sp.pair(e[0] - e[2])
	g[1][2], g[2][1] = sp.pair(e[1] - e[2])

	// smallest non-zero gap (exactly equal eigenvalues do not count, as in
	// QuTiP; all equal leaves MaxFloat64)
	dwMin := math.MaxFloat64
	for _, d := range [3]float64{math.Abs(e[0] - e[1]), math.Abs(e[0] - e[2]), math.Abs(e[1] - e[2])} {
		if d != 0 && d < dwMin {
			dwMin = d
		}
	}
	cut := SecularCutoff * dwMin

	// For three levels the secular rule can keep an element with
	// (a,b) ≠ (c,d) only when two eigenvalues coincide exactly or the
	// spectrum is equidistant within cut (ω_01 ≈ ω_12). Otherwise — almost
	// always — it keeps exactly the Pauli rates among the populations and the
	// decay of each coherence by itself; that is evaluated directly below. The
	// general loop after it is the rule written out.
	if !nearCoincidence(e, cut) {
		pauliAndDephasing(a, &g, rho, out)
		return
	}
	secularLoop(e, a, &g, cut, rho, out)
}

// secularLoop applies every element of the tensor that the secular rule at
// cut keeps, as the rule is written.
func secularLoop(e *[3]float64, a, g *[3][3]float64, cut float64, rho *[3][3]complex128, out *[3][3]complex128) {
	// m_db = Σ_k A_dk·A_kb·Γ_dk; the δ_bd term is m_ca (A is symmetric).
	var m [3][3]float64
	for d := range 3 {
		for b := range 3 {
			m[d][b] = a[d][0]*a[0][b]*g[d][0] + a[d][1]*a[1][b]*g[d][1] + a[d][2]*a[2][b]*g[d][2]
		}
	}
	for ia := range 3 {
		for ib := ia; ib < 3; ib++ {
			wab := e[ia] - e[ib]
			var sr, si float64
			for c := range 3 {
				for d := range 3 {
					if math.Abs(wab-(e[c]-e[d])) >= cut {
						continue
					}
					el := 0.5 * a[ia][c] * a[d][ib] * (g[c][ia] + g[d][ib])
					if ia == c {
						el -= 0.5 * m[d][ib]
					}
					if ib == d {
						el -= 0.5 * m[c][ia]
					}
					z := rho[c][d]
					sr += el * real(z)
					si += el * imag(z)
				}
			}
			out[ia][ib] += complex(sr, si)
			if ia != ib {
				out[ib][ia] += complex(sr, -si)
			}
		}
	}
}

// nearCoincidence reports whether the secular rule at cut keeps any element
// beyond the Pauli block and the diagonal of the coherence block.
func nearCoincidence(e *[3]float64, cut float64) bool {
	if e[0] == e[1] || e[0] == e[2] || e[1] == e[2] {
		return true
	}
	// ω_ab − ω_cd for distinct off-diagonal pairs is ±(E_i + E_k − 2E_j) for
	// the three choices of the middle level j, or a difference of one
	// eigenvalue pair (|·| ≥ dw_min > cut).
	return math.Abs(e[0]+e[2]-2*e[1]) < cut || math.Abs(e[1]+e[2]-2*e[0]) < cut || math.Abs(e[0]+e[1]-2*e[2]) < cut
}

// pauliAndDephasing applies the secular tensor when nothing coincides:
// dρ_aa = Σ_{c≠a} A_ac²·Γ_ca·ρ_cc − (Σ_k A_ak²·Γ_ak)·ρ_aa and
// dρ_ab = −½(M_aa + M_bb)·ρ_ab with M_aa = Σ_k A_ak²·Γ_ak (Γ_kk = S(0) = 0).
func pauliAndDephasing(a, g *[3][3]float64, rho *[3][3]complex128, out *[3][3]complex128) {
	var w [3][3]float64 // w[c][a]: rate c → a
	var mOut [3]float64
	for c := range 3 {
		for k := range 3 {
			if k != c {
				w[c][k] = a[c][k] * a[c][k] * g[c][k]
				mOut[c] += w[c][k]
			}
		}
	}
	p0, p1, p2 := real(rho[0][0]), real(rho[1][1]), real(rho[2][2])
	out[0][0] += complex(w[1][0]*p1+w[2][0]*p2-mOut[0]*p0, 0)
	out[1][1] += complex(w[0][1]*p0+w[2][1]*p2-mOut[1]*p1, 0)
	out[2][2] += complex(w[0][2]*p0+w[1][2]*p1-mOut[2]*p2, 0)
	for ia := range 3 {
		for ib := ia + 1; ib < 3; ib++ {
			z := scale(rho[ia][ib], -0.5*(mOut[ia]+mOut[ib]))
			out[ia][ib] += z
			out[ib][ia] += conj(z)
		}
	}
}
