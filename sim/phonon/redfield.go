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

	dwMin := math.MaxFloat64
	for i := range 3 {
		for j := range 3 {
			if d := math.Abs(e[i] - e[j]); d != 0 && d < dwMin {
				dwMin = d
			}
		}
	}
	cut := SecularCutoff * dwMin

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
