package phonon

import "math"

// The DOP853 step with the stage sums written out: each skips the zeros of
// the tableau (dopA row i has non-zeros only in the columns listed) and runs
// over the nY components with a constant bound, which the compiler keeps free
// of bounds checks. TestStageSumsMatchTableau checks the pattern against
// the tableau itself.

// stageCols lists, for each stage i ≥ 1, the j with a_ij ≠ 0, as written out
// in stageArg.
var stageCols = [12][]int{
	{},
	{0},
	{0, 1},
	{0, 2},
	{0, 2, 3},
	{0, 3, 4},
	{0, 3, 4, 5},
	{0, 3, 4, 5, 6},
	{0, 3, 4, 5, 6, 7},
	{0, 3, 4, 5, 6, 7, 8},
	{0, 3, 4, 5, 6, 7, 8, 9},
	{0, 3, 4, 5, 6, 7, 8, 9, 10},
}

// stageArg sets yt to the argument of stage i (1…11) of a step of length h
// from y with the stages k.
func stageArg(i int, h float64, y, yt *[nY]float64, k *[12][nY]float64) {
	switch i {
	case 1:
		a0 := h * dopA[1][0]
		k0 := &k[0]
		for q := range nY {
			yt[q] = y[q] + a0*k0[q]
		}
	case 2:
		a0, a1 := h*dopA[2][0], h*dopA[2][1]
		k0, k1 := &k[0], &k[1]
		for q := range nY {
			yt[q] = y[q] + a0*k0[q] + a1*k1[q]
		}
	case 3:
		a0, a2 := h*dopA[3][0], h*dopA[3][2]
		k0, k2 := &k[0], &k[2]
		for q := range nY {
			yt[q] = y[q] + a0*k0[q] + a2*k2[q]
		}
	case 4:
		a0, a2, a3 := h*dopA[4][0], h*dopA[4][2], h*dopA[4][3]
		k0, k2, k3 := &k[0], &k[2], &k[3]
		for q := range nY {
			yt[q] = y[q] + a0*k0[q] + a2*k2[q] + a3*k3[q]
		}
	case 5:
		a0, a3, a4 := h*dopA[5][0], h*dopA[5][3], h*dopA[5][4]
		k0, k3, k4 := &k[0], &k[3], &k[4]
		for q := range nY {
			yt[q] = y[q] + a0*k0[q] + a3*k3[q] + a4*k4[q]
		}
	case 6:
		a0, a3, a4, a5 := h*dopA[6][0], h*dopA[6][3], h*dopA[6][4], h*dopA[6][5]
		k0, k3, k4, k5 := &k[0], &k[3], &k[4], &k[5]
		for q := range nY {
			yt[q] = y[q] + a0*k0[q] + a3*k3[q] + a4*k4[q] + a5*k5[q]
		}
	case 7:
		a0, a3, a4, a5, a6 := h*dopA[7][0], h*dopA[7][3], h*dopA[7][4], h*dopA[7][5], h*dopA[7][6]
		k0, k3, k4, k5, k6 := &k[0], &k[3], &k[4], &k[5], &k[6]
		for q := range nY {
			yt[q] = y[q] + a0*k0[q] + a3*k3[q] + a4*k4[q] + a5*k5[q] + a6*k6[q]
		}
	case 8:
		a0, a3, a4, a5, a6, a7 := h*dopA[8][0], h*dopA[8][3], h*dopA[8][4], h*dopA[8][5], h*dopA[8][6], h*dopA[8][7]
		k0, k3, k4, k5, k6, k7 := &k[0], &k[3], &k[4], &k[5], &k[6], &k[7]
		for q := range nY {
			yt[q] = y[q] + a0*k0[q] + a3*k3[q] + a4*k4[q] + a5*k5[q] + a6*k6[q] + a7*k7[q]
		}
	case 9:
		a0, a3, a4, a5, a6, a7, a8 := h*dopA[9][0], h*dopA[9][3], h*dopA[9][4], h*dopA[9][5], h*dopA[9][6], h*dopA[9][7], h*dopA[9][8]
		k0, k3, k4, k5, k6, k7, k8 := &k[0], &k[3], &k[4], &k[5], &k[6], &k[7], &k[8]
		for q := range nY {
			yt[q] = y[q] + a0*k0[q] + a3*k3[q] + a4*k4[q] + a5*k5[q] + a6*k6[q] + a7*k7[q] + a8*k8[q]
		}
	case 10:
		a0, a3, a4, a5, a6, a7, a8, a9 := h*dopA[10][0], h*dopA[10][3], h*dopA[10][4], h*dopA[10][5], h*dopA[10][6], h*dopA[10][7], h*dopA[10][8], h*dopA[10][9]
		k0, k3, k4, k5, k6, k7, k8, k9 := &k[0], &k[3], &k[4], &k[5], &k[6], &k[7], &k[8], &k[9]
		for q := range nY {
			yt[q] = y[q] + a0*k0[q] + a3*k3[q] + a4*k4[q] + a5*k5[q] + a6*k6[q] + a7*k7[q] + a8*k8[q] + a9*k9[q]
		}
	case 11:
		a0, a3, a4, a5, a6, a7, a8, a9, a10 := h*dopA[11][0], h*dopA[11][3], h*dopA[11][4], h*dopA[11][5], h*dopA[11][6], h*dopA[11][7], h*dopA[11][8], h*dopA[11][9], h*dopA[11][10]
		k0, k3, k4, k5, k6, k7, k8, k9, k10 := &k[0], &k[3], &k[4], &k[5], &k[6], &k[7], &k[8], &k[9], &k[10]
		for q := range nY {
			yt[q] = y[q] + a0*k0[q] + a3*k3[q] + a4*k4[q] + a5*k5[q] + a6*k6[q] + a7*k7[q] + a8*k8[q] + a9*k9[q] + a10*k10[q]
		}
	}
}

// combine sets yn to the 8th-order solution of the step and returns Hairer's
// error measure (≤ 1 accepts the step). Only stages 0 and 5…11 enter b, e5
// and e3.
func combine(h, tol float64, y, yn *[nY]float64, k *[12][nY]float64) float64 {
	b0, b5, b6, b7, b8, b9, b10, b11 := dopB[0], dopB[5], dopB[6], dopB[7], dopB[8], dopB[9], dopB[10], dopB[11]
	e0, e5, e6, e7, e8, e9, e10, e11 := dopE5[0], dopE5[5], dopE5[6], dopE5[7], dopE5[8], dopE5[9], dopE5[10], dopE5[11]
	f0, f5, f6, f7, f8, f9, f10, f11 := dopE3[0], dopE3[5], dopE3[6], dopE3[7], dopE3[8], dopE3[9], dopE3[10], dopE3[11]
	k0, k5, k6, k7, k8, k9, k10, k11 := &k[0], &k[5], &k[6], &k[7], &k[8], &k[9], &k[10], &k[11]
	var s5, s3 float64
	for q := range nY {
		x0, x5, x6, x7, x8, x9, x10, x11 := k0[q], k5[q], k6[q], k7[q], k8[q], k9[q], k10[q], k11[q]
		yn[q] = y[q] + h*(b0*x0+b5*x5+b6*x6+b7*x7+b8*x8+b9*x9+b10*x10+b11*x11)
		d5 := e0*x0 + e5*x5 + e6*x6 + e7*x7 + e8*x8 + e9*x9 + e10*x10 + e11*x11
		d3 := f0*x0 + f5*x5 + f6*x6 + f7*x7 + f8*x8 + f9*x9 + f10*x10 + f11*x11
		isc := 1 / (tol + tol*math.Max(math.Abs(y[q]), math.Abs(yn[q])))
		d5 *= isc
		d3 *= isc
		s5 += d5 * d5
		s3 += d3 * d3
	}
	if s5 == 0 && s3 == 0 {
		return 0
	}
	return h * s5 / math.Sqrt((s5+0.01*s3)*nY)
}
