package analysis

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize"

	"github.com/gliss-lab/gliss/drivers/calib"
	"github.com/gliss-lab/gliss/sim/model"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// mapOf is the model map over gdd × areas: with the phonon bath when it is
// active (sim/phonon), else the plain model (sim/model).
func mapOf(ctx context.Context, base model.Params, bath *phonon.Bath, gdd, areas []float64) ([]model.MapPoint, error) {
	if bath.Active() {
		if err := bath.Validate(); err != nil {
			return nil, err
		}
		return phonon.Map(ctx, base, bath, gdd, model.AxisAreaPi, areas, nil)
	}
	return model.Map(ctx, base, gdd, model.AxisAreaPi, areas, nil)
}

// Channel chooses which photon yield of the model a counter channel sees.
type Channel int

const (
	// ChannelXX is the biexciton yield n_xx.
	ChannelXX Channel = iota
	// ChannelX is the exciton yield n_x.
	ChannelX
)

func (c Channel) String() string {
	switch c {
	case ChannelXX:
		return "xx"
	case ChannelX:
		return "x"
	}
	return fmt.Sprintf("Channel(%d)", int(c))
}

func (c Channel) yield(r model.Result) float64 {
	if c == ChannelX {
		return r.NX
	}
	return r.NXX
}

// FitParams are the parameters of the model fit of a map: counts at
// (GDD, P) = AmplitudeCounts·n(GDD, Θ = π·AreaPiPerSqrtUW·sqrt(P/µW);
// BindingMeV, DetuningMeV) + BackgroundCounts.
type FitParams struct {
	AreaPiPerSqrtUW  float64 `json:"area_pi_per_sqrt_uw"`
	BindingMeV       float64 `json:"binding_mev"`
	DetuningMeV      float64 `json:"detuning_mev"`
	AmplitudeCounts  float64 `json:"amplitude_counts"`
	BackgroundCounts float64 `json:"background_counts"`
}

// FitParamNames are the names of FitParams in the order of MapFit.Cov.
var FitParamNames = [5]string{"area_pi_per_sqrt_uw", "binding_mev", "detuning_mev", "amplitude_counts", "background_counts"}

func (p FitParams) vec() []float64 {
	return []float64{p.AreaPiPerSqrtUW, p.BindingMeV, p.DetuningMeV, p.AmplitudeCounts, p.BackgroundCounts}
}

func fitParamsOf(x []float64) FitParams {
	return FitParams{AreaPiPerSqrtUW: x[0], BindingMeV: x[1], DetuningMeV: x[2], AmplitudeCounts: x[3], BackgroundCounts: x[4]}
}

// yields computes the model yields over gdd × powers for the nonlinear
// parameters (area scale, binding, detuning), row-major.
func yields(ctx context.Context, base model.Params, bath *phonon.Bath, ch Channel, gdd, powers []float64, areaPiPerSqrtUW, bindingMeV, detuningMeV float64) ([]float64, error) {
	if !(areaPiPerSqrtUW > 0) {
		return nil, fmt.Errorf("area scale %g π/√µW: want > 0", areaPiPerSqrtUW)
	}
	areas := make([]float64, len(powers))
	for j, p := range powers {
		areas[j] = areaPiPerSqrtUW * math.Sqrt(p)
	}
	b := base
	b.BindingMeV, b.DetuningMeV = bindingMeV, detuningMeV
	pts, err := mapOf(ctx, b, bath, gdd, areas)
	if err != nil {
		return nil, err
	}
	out := make([]float64, len(pts))
	for k := range pts {
		out[k] = ch.yield(pts[k].Result)
	}
	return out, nil
}

// TheoryMap is the model's counts in the axes of a measured map (no
// instruments): counts[i][j] = A·n(gdd[i], Θ(powers[j])) + B, where base
// supplies the pulse (FWHMPS), the lifetimes and the solver tolerance and p
// the rest.
func TheoryMap(ctx context.Context, base model.Params, ch Channel, gddPS2, powersUW []float64, p FitParams) ([][]float64, error) {
	return TheoryMapBath(ctx, base, nil, ch, gddPS2, powersUW, p)
}

// TheoryMapBath is TheoryMap with the dot's phonon bath (nil or α = 0: none).
func TheoryMapBath(ctx context.Context, base model.Params, bath *phonon.Bath, ch Channel, gddPS2, powersUW []float64, p FitParams) ([][]float64, error) {
	n, err := yields(ctx, base, bath, ch, gddPS2, powersUW, p.AreaPiPerSqrtUW, p.BindingMeV, p.DetuningMeV)
	if err != nil {
		return nil, fmt.Errorf("theory map: %w", err)
	}
	out := make([][]float64, len(gddPS2))
	for i := range out {
		out[i] = make([]float64, len(powersUW))
		for j := range out[i] {
			out[i][j] = p.AmplitudeCounts*n[i*len(powersUW)+j] + p.BackgroundCounts
		}
	}
	return out, nil
}

// Grid is a map of values [chirp][power]; NaN (missing) is written to
// JSON as null.
type Grid [][]float64

// MarshalJSON writes the rows with null for NaN.
func (g Grid) MarshalJSON() ([]byte, error) {
	rows := make([][]*float64, len(g))
	for i, r := range g {
		rows[i] = make([]*float64, len(r))
		for j := range r {
			if !math.IsNaN(r[j]) && !math.IsInf(r[j], 0) {
				rows[i][j] = &r[j]
			}
		}
	}
	return json.Marshal(rows)
}

// MapFitOptions configures FitMap.
type MapFitOptions struct {
	// Base holds what is not fitted: FWHMPS, the lifetimes, Tolerance
	// (1e-5 is plenty against counting noise). Its GDD, area, binding and
	// detuning are ignored.
	Base model.Params
	// Bath is the dot's phonon bath (nil or α = 0: none, the plain model).
	Bath    *phonon.Bath
	Channel Channel
	// Start must give AreaPiPerSqrtUW (e.g. from the pulse-area calibration),
	// BindingMeV and DetuningMeV; AmplitudeCounts and BackgroundCounts of 0
	// are solved linearly at the start.
	Start FitParams
	// MaxIterations of the minimiser (0 means 50).
	MaxIterations int
}

// MapFit is the result of FitMap.
type MapFit struct {
	Params FitParams `json:"params"`
	// Sigma are 1σ uncertainties: the covariance (JᵀWJ)⁻¹ at the optimum,
	// scaled by the reduced χ².
	Sigma FitParams `json:"sigma"`
	// Cov is the 5×5 covariance, row-major, in the order of FitParamNames.
	Cov []float64 `json:"cov"`
	// ChiSq with Poisson weights σ² = max(counts, 1); DoF = points − 5.
	ChiSq    float64 `json:"chi_sq"`
	DoF      int     `json:"dof"`
	RedChiSq float64 `json:"red_chi_sq"`
	// ChiSqDrop is the decrease of χ² that one more Gauss–Newton step
	// predicts at the result (< 0.01: converged far inside 1σ).
	ChiSqDrop float64 `json:"chi_sq_drop"`
	// Model is the fitted counts map; Residuals = data − model (NaN where
	// the data are missing, JSON null), in the axes of the input map.
	Model     Grid `json:"model"`
	Residuals Grid `json:"residuals"`
	// ModelMaps counts the model maps computed; Iterations the minimiser's
	// major iterations; Status its stopping reason.
	ModelMaps  int    `json:"model_maps"`
	Iterations int    `json:"iterations"`
	Status     string `json:"status"`
}

// FitMap fits the dot model to a whole measured power × chirp map by
// weighted least squares: area scale, binding energy, detuning, amplitude
// and background. The objective χ² = Σ ((y − f)/σ)² is minimised with
// gonum's optimize.Newton on the Gauss–Newton Hessian 2·JᵀWJ with a
// backtracking line search; the Jacobian of the three nonlinear parameters
// comes from central differences of model maps (two maps per parameter),
// that of amplitude and background is exact. The start must be in the right
// Rabi lobe of the area scale (the χ² surface oscillates in it): start from
// the pulse-area calibration.
//
// The sign of the detuning: on a chirp axis symmetric about zero the map is
// nearly invariant under (GDD, Δ) → (−GDD, −Δ) (measured on the demo dot:
// at most 20 counts in 20000 for Δ = 0.08 meV; our reading: with the
// exciton far detuned by E_B/2, eliminating it leaves a two-level system
// with that symmetry). The fit then keeps the sign it starts from: take the
// start's sign from the laser wavelength (calib.DetuningMeV), or use an
// asymmetric chirp axis.
func FitMap(ctx context.Context, m PowerChirpMap, opt MapFitOptions) (MapFit, error) {
	if err := m.Validate(); err != nil {
		return MapFit{}, fmt.Errorf("map fit: %w", err)
	}
	st := opt.Start
	if !(st.AreaPiPerSqrtUW > 0) || math.IsNaN(st.BindingMeV) || math.IsNaN(st.DetuningMeV) {
		return MapFit{}, fmt.Errorf("map fit: start area_pi_per_sqrt_uw %g, binding %g meV, detuning %g meV: want area scale > 0 and finite energies", st.AreaPiPerSqrtUW, st.BindingMeV, st.DetuningMeV)
	}
	pr := &mapProblem{ctx: ctx, m: m, base: opt.Base, bath: opt.Bath, ch: opt.Channel}
	np := len(m.PowerUW)
	for i := range m.Counts {
		for j, c := range m.Counts[i] {
			if math.IsNaN(c) {
				continue
			}
			pr.idx = append(pr.idx, i*np+j)
			pr.y = append(pr.y, c)
			pr.w = append(pr.w, 1/math.Sqrt(math.Max(c, 1)))
		}
	}
	if len(pr.y) <= 5 {
		return MapFit{}, fmt.Errorf("map fit: %d measured points: need more than 5", len(pr.y))
	}
	x0 := st.vec()
	if st.AmplitudeCounts == 0 && st.BackgroundCounts == 0 {
		n, err := pr.yields(x0)
		if err != nil {
			return MapFit{}, fmt.Errorf("map fit: start: %w", err)
		}
		a, b, ok := linearFit(n, pr.y, pr.w)
		if !ok {
			return MapFit{}, errors.New("map fit: start: the model map is flat, amplitude and background are not determined")
		}
		x0[3], x0[4] = a, b
	}
	iters := opt.MaxIterations
	if iters == 0 {
		iters = 50
	}
	problem := optimize.Problem{
		Func: pr.chiSq,
		Grad: pr.grad,
		Hess: pr.hess,
		Status: func() (optimize.Status, error) {
			if pr.err != nil {
				return optimize.Failure, pr.err
			}
			return optimize.NotTerminated, nil
		},
	}
	settings := &optimize.Settings{
		MajorIterations: iters,
		// Δχ² below 1e-4 over 3 iterations is far inside 1σ (Δχ² = 1).
		Converger: &optimize.FunctionConverge{Absolute: 1e-4, Iterations: 3},
	}
	res, err := optimize.Minimize(problem, x0, settings, &optimize.Newton{Linesearcher: &optimize.Backtracking{}})
	if pr.err != nil {
		return MapFit{}, fmt.Errorf("map fit: %w", pr.err)
	}
	if res == nil {
		return MapFit{}, fmt.Errorf("map fit: %w", err)
	}
	optErr := err
	x := res.X
	// Covariance and residuals at the optimum.
	jac, f, err := pr.jacobian(x)
	if err != nil {
		return MapFit{}, fmt.Errorf("map fit: at the optimum: %w", err)
	}
	nData := len(pr.y)
	a := mat.NewSymDense(5, nil)
	chi := 0.0
	for k := 0; k < 5; k++ {
		for l := k; l < 5; l++ {
			s := 0.0
			for i := 0; i < nData; i++ {
				s += jac[i*5+k] * jac[i*5+l] * pr.w[i] * pr.w[i]
			}
			a.SetSym(k, l, s)
		}
	}
	for i := range pr.y {
		d := (pr.y[i] - f[i]) * pr.w[i]
		chi += d * d
	}
	var ch mat.Cholesky
	if !ch.Factorize(a) {
		return MapFit{}, errors.New("map fit: parameters not determined by the map (singular JᵀWJ at the optimum)")
	}
	var inv mat.SymDense
	if err := ch.InverseTo(&inv); err != nil {
		return MapFit{}, fmt.Errorf("map fit: covariance: %w", err)
	}
	// Gauss–Newton decrement: the χ² a further full step would still gain,
	// gᵀ(JᵀWJ)⁻¹g with g = JᵀW(y − f).
	g := mat.NewVecDense(5, nil)
	for k := 0; k < 5; k++ {
		s := 0.0
		for i := range pr.y {
			s += jac[i*5+k] * pr.w[i] * pr.w[i] * (pr.y[i] - f[i])
		}
		g.SetVec(k, s)
	}
	var hg mat.VecDense
	hg.MulVec(&inv, g)
	drop := mat.Dot(g, &hg)
	status := res.Status.String()
	if optErr != nil {
		// The line search stops when the solver's own error (Tolerance)
		// hides any further decrease; that is convergence if the step left
		// is worth far less than 1σ (Δχ² = 1).
		if drop > maxChiSqDrop {
			return MapFit{}, fmt.Errorf("map fit: stopped after %d iterations before convergence (a further step would still lower χ² by %.3g): %w", res.Stats.MajorIterations, drop, optErr)
		}
		status = "converged to the solver's noise (" + optErr.Error() + ")"
	} else if res.Status == optimize.IterationLimit && drop > maxChiSqDrop {
		return MapFit{}, fmt.Errorf("map fit: no convergence in %d iterations (a further step would still lower χ² by %.3g)", iters, drop)
	}
	dof := nData - 5
	scale := chi / float64(dof)
	out := MapFit{Params: fitParamsOf(x), Cov: make([]float64, 25), ChiSq: chi, DoF: dof, RedChiSq: scale,
		ChiSqDrop: drop, ModelMaps: pr.maps, Iterations: res.Stats.MajorIterations, Status: status}
	sig := make([]float64, 5)
	for k := 0; k < 5; k++ {
		for l := 0; l < 5; l++ {
			out.Cov[k*5+l] = inv.At(k, l) * scale
		}
		sig[k] = math.Sqrt(out.Cov[k*5+k])
	}
	out.Sigma = fitParamsOf(sig)
	out.Model, err = TheoryMapBath(ctx, opt.Base, opt.Bath, opt.Channel, m.GDDPS2, m.PowerUW, out.Params)
	if err != nil {
		return MapFit{}, fmt.Errorf("map fit: %w", err)
	}
	out.ModelMaps++
	out.Residuals = make([][]float64, len(m.GDDPS2))
	for i := range out.Residuals {
		out.Residuals[i] = make([]float64, np)
		for j := range out.Residuals[i] {
			out.Residuals[i][j] = m.Counts[i][j] - out.Model[i][j]
		}
	}
	return out, nil
}

// mapProblem evaluates the fit's χ², gradient and Gauss–Newton Hessian and
// caches the model maps of the last location.
type mapProblem struct {
	ctx  context.Context
	m    PowerChirpMap
	base model.Params
	bath *phonon.Bath
	ch   Channel
	idx  []int     // flat indices of the measured points
	y, w []float64 // counts and 1/σ at those points
	maps int
	err  error

	nX   [3]float64 // nonlinear parameters of nVal
	nVal []float64
	jX   []float64 // location of jVal, fVal
	jVal []float64
	fVal []float64
}

// maxChiSqDrop is the largest predicted χ² decrease accepted as converged.
const maxChiSqDrop = 0.01

// finite-difference steps of the nonlinear parameters (see stepOf).
const (
	relStepArea   = 1e-3
	stepEnergyMeV = 1e-2
)

func stepOf(k int, x []float64) float64 {
	if k == 0 {
		return relStepArea * x[0]
	}
	return stepEnergyMeV
}

// yields returns the model yields at the measured points.
func (pr *mapProblem) yields(x []float64) ([]float64, error) {
	key := [3]float64{x[0], x[1], x[2]}
	if pr.nVal != nil && key == pr.nX {
		return pr.nVal, nil
	}
	all, err := yields(pr.ctx, pr.base, pr.bath, pr.ch, pr.m.GDDPS2, pr.m.PowerUW, x[0], x[1], x[2])
	if err != nil {
		return nil, err
	}
	pr.maps++
	n := make([]float64, len(pr.idx))
	for i, k := range pr.idx {
		n[i] = all[k]
	}
	pr.nX, pr.nVal = key, n
	return n, nil
}

func (pr *mapProblem) chiSq(x []float64) float64 {
	if pr.err != nil {
		return math.Inf(1)
	}
	if err := pr.ctx.Err(); err != nil {
		pr.err = err
		return math.Inf(1)
	}
	n, err := pr.yields(x)
	if err != nil {
		// Out of the model's range (a line-search trial): not a minimum.
		var re *model.RangeError
		if errors.As(err, &re) || !(x[0] > 0) {
			return math.Inf(1)
		}
		pr.err = err
		return math.Inf(1)
	}
	chi := 0.0
	for i := range pr.y {
		d := (pr.y[i] - x[3]*n[i] - x[4]) * pr.w[i]
		chi += d * d
	}
	return chi
}

// jacobian returns ∂f/∂p (row-major, 5 columns) and f at the measured points.
func (pr *mapProblem) jacobian(x []float64) ([]float64, []float64, error) {
	if pr.jX != nil && equal(pr.jX, x) {
		return pr.jVal, pr.fVal, nil
	}
	n, err := pr.yields(x)
	if err != nil {
		return nil, nil, err
	}
	n = append([]float64(nil), n...)
	m := len(pr.y)
	jac := make([]float64, m*5)
	f := make([]float64, m)
	for i := range f {
		f[i] = x[3]*n[i] + x[4]
		jac[i*5+3] = n[i]
		jac[i*5+4] = 1
	}
	for k := 0; k < 3; k++ {
		h := stepOf(k, x)
		xp := append([]float64(nil), x...)
		xm := append([]float64(nil), x...)
		xp[k] += h
		xm[k] -= h
		np, err := pr.yields(xp)
		if err != nil {
			return nil, nil, fmt.Errorf("derivative in %s: %w", FitParamNames[k], err)
		}
		np = append([]float64(nil), np...)
		nm, err := pr.yields(xm)
		if err != nil {
			return nil, nil, fmt.Errorf("derivative in %s: %w", FitParamNames[k], err)
		}
		for i := range f {
			jac[i*5+k] = x[3] * (np[i] - nm[i]) / (2 * h)
		}
	}
	pr.jX, pr.jVal, pr.fVal = append([]float64(nil), x...), jac, f
	return jac, f, nil
}

func (pr *mapProblem) grad(g, x []float64) {
	for k := range g {
		g[k] = 0
	}
	jac, f, err := pr.jacobian(x)
	if err != nil {
		if pr.err == nil {
			pr.err = err
		}
		return
	}
	for i := range pr.y {
		r := (pr.y[i] - f[i]) * pr.w[i] * pr.w[i]
		for k := 0; k < 5; k++ {
			g[k] -= 2 * r * jac[i*5+k]
		}
	}
}

func (pr *mapProblem) hess(h *mat.SymDense, x []float64) {
	jac, _, err := pr.jacobian(x)
	if err != nil {
		if pr.err == nil {
			pr.err = err
		}
		for k := 0; k < 5; k++ {
			for l := k; l < 5; l++ {
				h.SetSym(k, l, 0)
			}
			h.SetSym(k, k, 1)
		}
		return
	}
	for k := 0; k < 5; k++ {
		for l := k; l < 5; l++ {
			s := 0.0
			for i := range pr.y {
				s += jac[i*5+k] * jac[i*5+l] * pr.w[i] * pr.w[i]
			}
			h.SetSym(k, l, 2*s)
		}
	}
}

func equal(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// linearFit solves y ≈ a·n + b with weights w² (w = 1/σ).
func linearFit(n, y, w []float64) (a, b float64, ok bool) {
	var sw, sn, snn, sy, sny float64
	for i := range n {
		ww := w[i] * w[i]
		sw += ww
		sn += ww * n[i]
		snn += ww * n[i] * n[i]
		sy += ww * y[i]
		sny += ww * n[i] * y[i]
	}
	det := sw*snn - sn*sn
	if !(det > 1e-12*sw*snn) {
		return 0, 0, false
	}
	a = (sw*sny - sn*sy) / det
	b = (sy - a*sn) / sw
	return a, b, true
}

// YieldCurve tabulates the model's yield against pulse area at one chirp
// and detuning (from base), from 0 to maxAreaPi in steps of stepAreaPi.
func YieldCurve(ctx context.Context, base model.Params, ch Channel, gddPS2, maxAreaPi, stepAreaPi float64) (calib.YieldCurve, error) {
	return YieldCurveBath(ctx, base, nil, ch, gddPS2, maxAreaPi, stepAreaPi)
}

// YieldCurveBath is YieldCurve with the dot's phonon bath (nil: none).
func YieldCurveBath(ctx context.Context, base model.Params, bath *phonon.Bath, ch Channel, gddPS2, maxAreaPi, stepAreaPi float64) (calib.YieldCurve, error) {
	if !(stepAreaPi > 0) || !(maxAreaPi > 3*stepAreaPi) || maxAreaPi > model.MaxAreaPi {
		return calib.YieldCurve{}, fmt.Errorf("yield curve: max area %g π, step %g π: want 0 < 3·step < max ≤ %g", maxAreaPi, stepAreaPi, model.MaxAreaPi)
	}
	n := int(math.Round(maxAreaPi/stepAreaPi)) + 1
	areas := model.Linspace(0, maxAreaPi, n)
	pts, err := mapOf(ctx, base, bath, []float64{gddPS2}, areas)
	if err != nil {
		return calib.YieldCurve{}, fmt.Errorf("yield curve: %w", err)
	}
	out := calib.YieldCurve{AreaPi: areas, Yield: make([]float64, n)}
	for k := range pts {
		out.Yield[k] = ch.yield(pts[k].Result)
	}
	return out, nil
}

// CalibratePulseArea fits the pulse-area calibration to the biexciton counts
// of a power sweep at zero chirp (calib.FitPulseArea), with the yield curve of
// the model dot base (its FWHM, binding energy, detuning, lifetimes and
// tolerance) tabulated from 0 to maxAreaPi (0 means 10) in steps of 0.01 π.
// maxAreaPi bounds the area scales the fit searches: make it larger than the
// largest area the sweep can have reached.
func CalibratePulseArea(ctx context.Context, base model.Params, powersUW, countsXX []float64, maxAreaPi float64) (calib.PulseAreaFit, error) {
	return CalibratePulseAreaBath(ctx, base, nil, powersUW, countsXX, maxAreaPi)
}

// CalibratePulseAreaBath is CalibratePulseArea with the yield curve of the
// dot with its phonon bath (nil: none). A dot with phonons has damped
// two-photon Rabi rotations; the plain model's curve then misfits the
// counts (large χ²) and shifts the π-pulse power.
func CalibratePulseAreaBath(ctx context.Context, base model.Params, bath *phonon.Bath, powersUW, countsXX []float64, maxAreaPi float64) (calib.PulseAreaFit, error) {
	if maxAreaPi == 0 {
		maxAreaPi = 10
	}
	b := base
	b.GDDPS2 = 0
	curve, err := YieldCurveBath(ctx, b, bath, ChannelXX, 0, maxAreaPi, 0.01)
	if err != nil {
		return calib.PulseAreaFit{}, fmt.Errorf("pulse area calibration: %w", err)
	}
	fit, err := calib.FitPulseArea(powersUW, countsXX, curve)
	if err != nil {
		return calib.PulseAreaFit{}, fmt.Errorf("pulse area calibration: %w", err)
	}
	return fit, nil
}
