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
	a := *h
	*v = [3][3]float64{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}}
	for sweep := 0; sweep < 50; sweep++ {
		off := a[0][1]*a[0][1] + a[0][2]*a[0][2] + a[1][2]*a[1][2]
		diag := a[0][0]*a[0][0] + a[1][1]*a[1][1] + a[2][2]*a[2][2]
		if off <= 1e-34*diag || off == 0 {
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
	if apq == 0 {
		return
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
