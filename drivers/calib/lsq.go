package calib

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// curveFit is a weighted nonlinear least-squares problem: minimise
// Σ ((y_i − f(x_i; p)) / σ_i)² over the parameters p.
type curveFit struct {
	y     []float64 // observations
	sigma []float64 // per-point standard deviations; nil means all 1
	// model fills f[i] = f(x_i; p) and, when jac is not nil, the Jacobian
	// jac[i][k] = ∂f(x_i; p)/∂p_k (row-major, len(y)·len(p)).
	model func(p, f, jac []float64)
}

// fitResult is the optimum of a curveFit.
type fitResult struct {
	P         []float64 // parameters at the optimum
	Cov       []float64 // covariance, row-major n×n, scaled by the reduced χ²
	Sigma     []float64 // sqrt of the diagonal of Cov
	Residuals []float64 // y_i − f(x_i; p), unweighted
	ChiSq     float64   // Σ weighted residual², at the optimum
	DoF       int       // len(y) − len(p)
	Iter      int
}

// errNoConvergence is returned when the iteration limit is reached.
var errNoConvergence = errors.New("least squares: no convergence")

// levenbergMarquardt minimises the problem from p0 with Marquardt's damped
// Gauss–Newton step (JᵀJ + λ·diag(JᵀJ))·δ = Jᵀr (Marquardt, J. SIAM 11, 431
// (1963)). The covariance is (JᵀWJ)⁻¹·χ²/(m−n), the convention of SciPy's
// curve_fit with absolute_sigma=False.
func (c curveFit) levenbergMarquardt(p0 []float64) (fitResult, error) {
	m, n := len(c.y), len(p0)
	if m <= n {
		return fitResult{}, fmt.Errorf("least squares: %d points for %d parameters, need more points than parameters", m, n)
	}
	w := make([]float64, m) // 1/σ
	for i := range w {
		w[i] = 1
		if c.sigma != nil {
			if !(c.sigma[i] > 0) || math.IsInf(c.sigma[i], 0) {
				return fitResult{}, fmt.Errorf("least squares: sigma[%d] = %g, must be finite and > 0", i, c.sigma[i])
			}
			w[i] = 1 / c.sigma[i]
		}
	}
	p := append([]float64(nil), p0...)
	f := make([]float64, m)
	jac := make([]float64, m*n)
	r := make([]float64, m)
	cost := func(p []float64, withJac bool) float64 {
		if withJac {
			c.model(p, f, jac)
		} else {
			c.model(p, f, nil)
		}
		s := 0.0
		for i := range r {
			r[i] = (c.y[i] - f[i]) * w[i]
			s += r[i] * r[i]
		}
		return s
	}
	chi := cost(p, true)
	if math.IsNaN(chi) || math.IsInf(chi, 0) {
		return fitResult{}, fmt.Errorf("least squares: model is not finite at the start %v", p0)
	}
	a := mat.NewSymDense(n, nil)
	g := mat.NewVecDense(n, nil)
	delta := mat.NewVecDense(n, nil)
	trial := make([]float64, n)
	lambda := 1e-3
	iter := 0
	converged := false
	for ; iter < 500 && !converged; iter++ {
		// Normal equations at p: A = JᵀWJ, g = JᵀW(y−f).
		for k := 0; k < n; k++ {
			gk := 0.0
			for i := 0; i < m; i++ {
				gk += jac[i*n+k] * w[i] * r[i]
			}
			g.SetVec(k, gk)
			for l := k; l < n; l++ {
				s := 0.0
				for i := 0; i < m; i++ {
					s += jac[i*n+k] * jac[i*n+l] * w[i] * w[i]
				}
				a.SetSym(k, l, s)
			}
		}
		for {
			damped := mat.NewSymDense(n, nil)
			damped.CopySym(a)
			for k := 0; k < n; k++ {
				d := a.At(k, k)
				if d == 0 {
					d = 1
				}
				damped.SetSym(k, k, a.At(k, k)+lambda*d)
			}
			var ch mat.Cholesky
			ok := ch.Factorize(damped)
			if ok {
				if err := ch.SolveVecTo(delta, g); err != nil {
					ok = false
				}
			}
			if !ok {
				lambda *= 10
				if lambda > 1e16 {
					return fitResult{}, errors.New("least squares: normal equations singular")
				}
				continue
			}
			small := true
			for k := 0; k < n; k++ {
				trial[k] = p[k] + delta.AtVec(k)
				if math.Abs(delta.AtVec(k)) > 1e-13*(math.Abs(p[k])+1e-13) {
					small = false
				}
			}
			chiT := cost(trial, false)
			if chiT <= chi && !math.IsNaN(chiT) {
				rel := (chi - chiT) / math.Max(chi, 1e-300)
				copy(p, trial)
				chi = cost(p, true)
				lambda = math.Max(lambda/10, 1e-12)
				if small || rel < 1e-15 {
					converged = true
				}
				break
			}
			// Rejected: restore f and r at p (J is untouched), damp harder.
			cost(p, false)
			if small {
				converged = true
				break
			}
			lambda *= 10
			if lambda > 1e16 {
				converged = true // no descent direction left: p is the minimum to rounding
				break
			}
		}
	}
	if !converged {
		return fitResult{}, fmt.Errorf("%w after %d iterations", errNoConvergence, iter)
	}
	// Covariance from the undamped normal matrix at the optimum.
	chi = cost(p, true)
	for k := 0; k < n; k++ {
		for l := k; l < n; l++ {
			s := 0.0
			for i := 0; i < m; i++ {
				s += jac[i*n+k] * jac[i*n+l] * w[i] * w[i]
			}
			a.SetSym(k, l, s)
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(a) {
		return fitResult{}, errors.New("least squares: parameters not determined by the data (singular JᵀJ at the optimum)")
	}
	var inv mat.SymDense
	if err := ch.InverseTo(&inv); err != nil {
		return fitResult{}, fmt.Errorf("least squares: covariance: %w", err)
	}
	dof := m - n
	scale := chi / float64(dof)
	res := fitResult{P: p, Cov: make([]float64, n*n), Sigma: make([]float64, n), Residuals: make([]float64, m), ChiSq: chi, DoF: dof, Iter: iter}
	for k := 0; k < n; k++ {
		for l := 0; l < n; l++ {
			res.Cov[k*n+l] = inv.At(k, l) * scale
		}
		res.Sigma[k] = math.Sqrt(res.Cov[k*n+k])
	}
	for i := range res.Residuals {
		res.Residuals[i] = c.y[i] - f[i]
	}
	return res, nil
}

// rms is the root mean square of v.
func rms(v []float64) float64 {
	if len(v) == 0 {
		return 0
	}
	s := 0.0
	for _, x := range v {
		s += x * x
	}
	return math.Sqrt(s / float64(len(v)))
}

// checkXY validates paired samples.
func checkXY(xName, yName string, x, y []float64, minN int) error {
	if len(x) != len(y) {
		return fmt.Errorf("%d %s values but %d %s values: lengths must match", len(x), xName, len(y), yName)
	}
	if len(x) < minN {
		return fmt.Errorf("%d readings: need at least %d", len(x), minN)
	}
	for i := range x {
		if math.IsNaN(x[i]) || math.IsInf(x[i], 0) {
			return fmt.Errorf("%s[%d] = %g: must be finite", xName, i, x[i])
		}
		if math.IsNaN(y[i]) || math.IsInf(y[i], 0) {
			return fmt.Errorf("%s[%d] = %g: must be finite", yName, i, y[i])
		}
	}
	return nil
}
