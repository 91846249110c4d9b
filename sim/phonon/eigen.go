package phonon

import "math"

// symEig3 diagonalises the real symmetric 3×3 matrix h by cyclic Jacobi
// rotations (Jacobi 1846; Golub & Van Loan, Matrix Computations, 4th ed.,
// §8.5): on return h = V·diag(e)·Vᵀ with the eigenvectors in the columns of
// v. The eigenvalues are in no particular order; nothing that uses them here
// depends on the order or on the signs of the eigenvectors. Jacobi keeps
// the eigenvectors orthonormal to rounding even when two eigenvalues nearly
// cross, which closed-form (cubic) solutions do not.
func symEig3(h *[3][3]float64, e *[3]float64, v *[3][3]float64) {
	*v = [3][3]float64{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}}
	jacobi(*h, e, v, 1e-34)
}

// symEig3Warm is symEig3 started from the orthonormal matrix v (the
// eigenvectors of a nearby matrix, such as H at the previous
// right-hand-side call; the caller re-orthonormalises it now and then, see
// orthonormalise): it rotates h into that basis first, where it is
// nearly diagonal, so one or two sweeps finish the job. It stops when the
// off-diagonal part is below 1e-9 of the diagonal: eigenvectors to about
// 1e-9 (relative to the gaps), which puts errors of ~1e-9 on the phonon rates,
// far below the solver's tolerance — and the next warm start continues from
// there.
func symEig3Warm(h *[3][3]float64, e *[3]float64, v *[3][3]float64) {
	var hv, a [3][3]float64
	for i := range 3 {
		for j := range 3 {
			hv[i][j] = h[i][0]*v[0][j] + h[i][1]*v[1][j] + h[i][2]*v[2][j]
		}
	}
	for i := range 3 {
		for j := i; j < 3; j++ {
			a[i][j] = v[0][i]*hv[0][j] + v[1][i]*hv[1][j] + v[2][i]*hv[2][j]
			a[j][i] = a[i][j]
		}
	}
	jacobi(a, e, v, 1e-18)
}

// jacobi diagonalises a by rotations accumulated into v, until the sum of
// squares of the off-diagonal elements is below rel2 × that of the diagonal.
func jacobi(a [3][3]float64, e *[3]float64, v *[3][3]float64, rel2 float64) {
	for sweep := 0; sweep < 50; sweep++ {
		off := a[0][1]*a[0][1] + a[0][2]*a[0][2] + a[1][2]*a[1][2]
		diag := a[0][0]*a[0][0] + a[1][1]*a[1][1] + a[2][2]*a[2][2]
		if off <= rel2*diag || off == 0 {
			break
		}
		rotate(&a, v, 0, 1)
		rotate(&a, v, 0, 2)
		rotate(&a, v, 1, 2)
	}
	e[0], e[1], e[2] = a[0][0], a[1][1], a[2][2]
}

// rotate applies the Jacobi rotation in the (p, q) plane that zeroes a[p][q],
// accumulating it into the columns of v. r is the third index.
func rotate(a, v *[3][3]float64, p, q int) {
	apq := a[p][q]
	if math.Abs(apq) <= 1e-18*(math.Abs(a[p][p])+math.Abs(a[q][q])) {
		// Already diagonal to rounding in this plane (or exactly zero). The
		// skip level is below the sweep's stopping level (1e-17 overall), so a
		// sweep of skips always ends the iteration.
		if apq == 0 || a[p][p] != 0 || a[q][q] != 0 {
			return
		}
	}
	r := 3 - p - q
	theta := (a[q][q] - a[p][p]) / (2 * apq)
	var t float64
	if math.Abs(theta) > 1e150 {
		t = 0.5 / theta
	} else {
		t = 1 / (math.Abs(theta) + math.Sqrt(theta*theta+1))
		if theta < 0 {
			t = -t
		}
	}
	c := 1 / math.Sqrt(t*t+1)
	s := t * c
	a[p][p] -= t * apq
	a[q][q] += t * apq
	a[p][q], a[q][p] = 0, 0
	arp, arq := a[r][p], a[r][q]
	a[r][p] = c*arp - s*arq
	a[p][r] = a[r][p]
	a[r][q] = s*arp + c*arq
	a[q][r] = a[r][q]
	for k := range 3 {
		vkp, vkq := v[k][p], v[k][q]
		v[k][p] = c*vkp - s*vkq
		v[k][q] = s*vkp + c*vkq
	}
}

// orthonormalise re-orthonormalises the columns of v (modified Gram–Schmidt),
// so that rounding does not pile up over many warm starts.
func orthonormalise(v *[3][3]float64) {
	for k := range 3 {
		for l := range k {
			d := v[0][k]*v[0][l] + v[1][k]*v[1][l] + v[2][k]*v[2][l]
			v[0][k] -= d * v[0][l]
			v[1][k] -= d * v[1][l]
			v[2][k] -= d * v[2][l]
		}
		n := math.Sqrt(v[0][k]*v[0][k] + v[1][k]*v[1][k] + v[2][k]*v[2][k])
		v[0][k] /= n
		v[1][k] /= n
		v[2][k] /= n
	}
}
