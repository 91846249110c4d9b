package model

import "math"

// The DOP853 step unrolled: the stage sums skip the zeros of the tableau and
// run over all nMax components with a constant bound. Written out from the
// arrays of dop853_coef.go (TestToleranceConvergence and the exact-limit
// tests check the result).

// lane is the state of one integration: the solution, the trial solution,
// the stage argument and the 12 stages.
type lane struct {
	y, ynew, ytmp [nMax]float64
	k             [12][nMax]float64
}

// stageArg sets ytmp to the argument of stage i (1…11) of a step of length h.
func (ln *lane) stageArg(i int, h float64) {
	y, yt, k := &ln.y, &ln.ytmp, &ln.k
	switch i {
	case 1:
		a0 := h * dopA[1][0]
		for q := range nMax {
			yt[q] = y[q] + a0*k[0][q]
		}
	case 2:
		a0, a1 := h*dopA[2][0], h*dopA[2][1]
		for q := range nMax {
			yt[q] = y[q] + a0*k[0][q] + a1*k[1][q]
		}
	case 3:
		a0, a2 := h*dopA[3][0], h*dopA[3][2]
		for q := range nMax {
			yt[q] = y[q] + a0*k[0][q] + a2*k[2][q]
		}
	case 4:
		a0, a2, a3 := h*dopA[4][0], h*dopA[4][2], h*dopA[4][3]
		for q := range nMax {
			yt[q] = y[q] + a0*k[0][q] + a2*k[2][q] + a3*k[3][q]
		}
	case 5:
		a0, a3, a4 := h*dopA[5][0], h*dopA[5][3], h*dopA[5][4]
		for q := range nMax {
			yt[q] = y[q] + a0*k[0][q] + a3*k[3][q] + a4*k[4][q]
		}
	case 6:
		a0, a3, a4, a5 := h*dopA[6][0], h*dopA[6][3], h*dopA[6][4], h*dopA[6][5]
		for q := range nMax {
			yt[q] = y[q] + a0*k[0][q] + a3*k[3][q] + a4*k[4][q] + a5*k[5][q]
		}
	case 7:
		a0, a3, a4, a5, a6 := h*dopA[7][0], h*dopA[7][3], h*dopA[7][4], h*dopA[7][5], h*dopA[7][6]
		for q := range nMax {
			yt[q] = y[q] + a0*k[0][q] + a3*k[3][q] + a4*k[4][q] + a5*k[5][q] + a6*k[6][q]
		}
	case 8:
		a0, a3, a4, a5, a6, a7 := h*dopA[8][0], h*dopA[8][3], h*dopA[8][4], h*dopA[8][5], h*dopA[8][6], h*dopA[8][7]
		for q := range nMax {
			yt[q] = y[q] + a0*k[0][q] + a3*k[3][q] + a4*k[4][q] + a5*k[5][q] + a6*k[6][q] + a7*k[7][q]
		}
	case 9:
		a0, a3, a4, a5, a6, a7, a8 := h*dopA[9][0], h*dopA[9][3], h*dopA[9][4], h*dopA[9][5], h*dopA[9][6], h*dopA[9][7], h*dopA[9][8]
		for q := range nMax {
			yt[q] = y[q] + a0*k[0][q] + a3*k[3][q] + a4*k[4][q] + a5*k[5][q] + a6*k[6][q] + a7*k[7][q] + a8*k[8][q]
		}
	case 10:
		a0, a3, a4, a5, a6, a7, a8, a9 := h*dopA[10][0], h*dopA[10][3], h*dopA[10][4], h*dopA[10][5], h*dopA[10][6], h*dopA[10][7], h*dopA[10][8], h*dopA[10][9]
		for q := range nMax {
			yt[q] = y[q] + a0*k[0][q] + a3*k[3][q] + a4*k[4][q] + a5*k[5][q] + a6*k[6][q] + a7*k[7][q] + a8*k[8][q] + a9*k[9][q]
		}
	case 11:
		a0, a3, a4, a5, a6, a7, a8, a9, a10 := h*dopA[11][0], h*dopA[11][3], h*dopA[11][4], h*dopA[11][5], h*dopA[11][6], h*dopA[11][7], h*dopA[11][8], h*dopA[11][9], h*dopA[11][10]
		for q := range nMax {
			yt[q] = y[q] + a0*k[0][q] + a3*k[3][q] + a4*k[4][q] + a5*k[5][q] + a6*k[6][q] + a7*k[7][q] + a8*k[8][q] + a9*k[9][q] + a10*k[10][q]
		}
	}
}

// combine forms the 8th-order solution in ynew and returns Hairer's error
// measure of the step (≤ 1 accepts it) over the first n components.
func (ln *lane) combine(h, tol float64, n int) float64 {
	y, yn, k := &ln.y, &ln.ynew, &ln.k
	b0, b5, b6, b7, b8, b9, b10, b11 := dopB[0], dopB[5], dopB[6], dopB[7], dopB[8], dopB[9], dopB[10], dopB[11]
	e0, e5, e6, e7, e8, e9, e10, e11 := dopE5[0], dopE5[5], dopE5[6], dopE5[7], dopE5[8], dopE5[9], dopE5[10], dopE5[11]
	f0, f5, f6, f7, f8, f9, f10, f11 := dopE3[0], dopE3[5], dopE3[6], dopE3[7], dopE3[8], dopE3[9], dopE3[10], dopE3[11]
	var err5, err3 float64
	for q := range nMax {
		yn[q] = y[q] + h*(b0*k[0][q]+b5*k[5][q]+b6*k[6][q]+b7*k[7][q]+b8*k[8][q]+b9*k[9][q]+b10*k[10][q]+b11*k[11][q])
		d5 := e0*k[0][q] + e5*k[5][q] + e6*k[6][q] + e7*k[7][q] + e8*k[8][q] + e9*k[9][q] + e10*k[10][q] + e11*k[11][q]
		d3 := f0*k[0][q] + f5*k[5][q] + f6*k[6][q] + f7*k[7][q] + f8*k[8][q] + f9*k[9][q] + f10*k[10][q] + f11*k[11][q]
		sc := tol + tol*max(math.Abs(y[q]), math.Abs(yn[q]))
		d5 /= sc
		d3 /= sc
		err5 += d5 * d5
		err3 += d3 * d3
	}
	if err5 == 0 && err3 == 0 {
		return 0
	}
	return h * err5 / math.Sqrt((err5+0.01*err3)*float64(n))
}
