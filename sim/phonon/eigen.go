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

// ladderEig diagonalises the real symmetric ladder matrix
//
//	H = [[0, a, 0], [a, d1, b], [0, b, d2]]
//
// (the form of H(t)/ħ here: level 0 at zero energy, real couplings on the two
// links only) in closed form: on return H = V·diag(e)·Vᵀ with e ascending and
// the eigenvectors in the columns of v. The eigenvalues come from the
// trigonometric solution of the characteristic cubic (Smith, Commun. ACM 4,
// 168 (1961)), each polished by one Newton step on det(H − λ) (which loses the
// √ε accuracy of the arccos near a double root), the eigenvectors from cross
// products of two rows of H − λ (the largest of the three, for the two
// eigenvalues farther from their neighbour), the third as the cross product
// of those two. Cross products give eigenvectors to about ε·‖H‖/gap, so when
// the smallest gap is below 1e-6·‖H‖ it falls back to Jacobi (symEig3),
// which stays orthonormal through near crossings. ladderEig does not
// allocate.
func ladderEig(d1, d2, a, b float64, e *[3]float64, v *[3][3]float64) {
	q := (d1 + d2) / 3
	b0, b1, b2 := -q, d1-q, d2-q
	p2 := b0*b0 + b1*b1 + b2*b2 + 2*(a*a+b*b)
	if p2 == 0 {
		*e = [3]float64{}
		*v = [3][3]float64{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}}
		return
	}
	p := math.Sqrt(p2 / 6)
	// det(B)/(2p³) with B = H − q·I
	r := (b0*(b1*b2-b*b) - a*a*b2) / (2 * p * p * p)
	r = math.Max(-1, math.Min(1, r))
	phi := math.Acos(r) / 3
	sn, cs := math.Sincos(phi)
	// cos(φ + 2π/3) = −½cos φ − (√3/2) sin φ
	const h3 = 0.8660254037844386 // √3/2
	lmax := q + 2*p*cs
	lmin := q + 2*p*(-0.5*cs-h3*sn)
	lmid := 3*q - lmax - lmin
	l := [3]float64{lmin, lmid, lmax}
	// The arccos is ill-conditioned only near a double root (r → ±1); away
	// from one the trigonometric values are accurate to rounding.
	polish := math.Min(lmid-lmin, lmax-lmid) < 1e-2*p
	for k := range l {
		if !polish {
			break
		}
		x := l[k]
		// f(λ) = det(H − λ) = −λ·[(d1−λ)(d2−λ) − b²] − a²·(d2−λ)
		u, w := d1-x, d2-x
		f := -x*(u*w-b*b) - a*a*w
		df := -(u*w - b*b) + x*(u+w) + a*a
		if df != 0 {
			if nx := x - f/df; math.Abs(nx-x) < 1e-3*p {
				l[k] = nx
			}
		}
	}
	if !(l[0] <= l[1] && l[1] <= l[2]) {
		l[0], l[1], l[2] = sort3(l[0], l[1], l[2])
	}
	g01, g12 := l[1]-l[0], l[2]-l[1]
	norm := 3 * p // ≥ the spectral radius of B
	if math.Min(g01, g12) < 1e-6*norm {
		symEig3(&[3][3]float64{{0, a, 0}, {a, d1, b}, {0, b, d2}}, e, v)
		// ascending, like the closed form
		for i := range 2 {
			for j := i + 1; j < 3; j++ {
				if e[j] < e[i] {
					e[i], e[j] = e[j], e[i]
					for k := range 3 {
						v[k][i], v[k][j] = v[k][j], v[k][i]
					}
				}
			}
		}
		return
	}
	*e = l
	// the two eigenvalues farther from their neighbours
	i, j := 0, 2
	if g01 < g12 {
		i, j = 2, 0
	}
	xi := ladderVec(d1, d2, a, b, l[i])
	xj := ladderVec(d1, d2, a, b, l[j])
	// xj ⟂ xi against rounding, then the third column
	d := xi[0]*xj[0] + xi[1]*xj[1] + xi[2]*xj[2]
	xj = [3]float64{xj[0] - d*xi[0], xj[1] - d*xi[1], xj[2] - d*xi[2]}
	n := 1 / math.Sqrt(xj[0]*xj[0]+xj[1]*xj[1]+xj[2]*xj[2])
	xj = [3]float64{xj[0] * n, xj[1] * n, xj[2] * n}
	xk := [3]float64{xi[1]*xj[2] - xi[2]*xj[1], xi[2]*xj[0] - xi[0]*xj[2], xi[0]*xj[1] - xi[1]*xj[0]}
	for row := range 3 {
		v[row][i], v[row][j], v[row][1] = xi[row], xj[row], xk[row]
	}
}

// ladderVec returns the unit eigenvector of the ladder matrix of ladderEig
// for its eigenvalue x: the largest cross product of two rows of H − x.
func ladderVec(d1, d2, a, b, x float64) [3]float64 {
	u, w := d1-x, d2-x
	// rows r0 = (−x, a, 0), r1 = (a, u, b), r2 = (0, b, w)
	c01 := [3]float64{a * b, x * b, -x*u - a*a}
	c02 := [3]float64{a * w, x * w, -x * b}
	c12 := [3]float64{u*w - b*b, -a * w, a * b}
	n01 := c01[0]*c01[0] + c01[1]*c01[1] + c01[2]*c01[2]
	n02 := c02[0]*c02[0] + c02[1]*c02[1] + c02[2]*c02[2]
	n12 := c12[0]*c12[0] + c12[1]*c12[1] + c12[2]*c12[2]
	c, nn := c01, n01
	if n02 > nn {
		c, nn = c02, n02
	}
	if n12 > nn {
		c, nn = c12, n12
	}
	s := 1 / math.Sqrt(nn)
	return [3]float64{c[0] * s, c[1] * s, c[2] * s}
}

func sort3(x, y, z float64) (float64, float64, float64) {
	if x > y {
		x, y = y, x
	}
	if y > z {
		y, z = z, y
	}
	if x > y {
		x, y = y, x
	}
	return x, y, z
}
