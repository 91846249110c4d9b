package calib

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/interp"
)

// PulseArea maps average power to the pulse area of the transform-limited
// pulse of the same energy: Θ/π = AreaPiPerSqrtUW·sqrt(P/µW), since the area
// grows with the field amplitude, Θ ∝ sqrt(P) (§1).
type PulseArea struct {
	AreaPiPerSqrtUW float64 `json:"area_pi_per_sqrt_uw"`
	// SigmaAreaPiPerSqrtUW is the 1σ uncertainty of the scale (0 if not fitted).
	SigmaAreaPiPerSqrtUW float64 `json:"sigma_area_pi_per_sqrt_uw,omitempty"`
	// PiPowerUW is the power of the two-photon π pulse: the first maximum of
	// the biexciton yield at zero chirp, at area PiAreaPi of the model used
	// for the fit. SigmaPiPowerUW is its 1σ uncertainty.
	PiPowerUW      float64 `json:"pi_power_uw,omitempty"`
	SigmaPiPowerUW float64 `json:"sigma_pi_power_uw,omitempty"`
	PiAreaPi       float64 `json:"pi_area_pi,omitempty"`
}

// AreaPi is the pulse area, in units of π, at average power powerUW.
func (p PulseArea) AreaPi(powerUW float64) float64 {
	if powerUW <= 0 {
		return 0
	}
	return p.AreaPiPerSqrtUW * math.Sqrt(powerUW)
}

// PowerUW is the average power that gives pulse area areaPi (units of π).
func (p PulseArea) PowerUW(areaPi float64) float64 {
	r := areaPi / p.AreaPiPerSqrtUW
	return r * r
}

// Validate checks the calibration's numbers.
func (p PulseArea) Validate() error {
	if !(p.AreaPiPerSqrtUW > 0) || math.IsInf(p.AreaPiPerSqrtUW, 0) {
		return fmt.Errorf("pulse area: area_pi_per_sqrt_uw %g: want > 0 and finite", p.AreaPiPerSqrtUW)
	}
	if !finite(p.SigmaAreaPiPerSqrtUW, p.PiPowerUW, p.SigmaPiPowerUW, p.PiAreaPi) || p.SigmaAreaPiPerSqrtUW < 0 || p.PiPowerUW < 0 || p.SigmaPiPowerUW < 0 || p.PiAreaPi < 0 {
		return errors.New("pulse area: sigma_area_pi_per_sqrt_uw, pi_power_uw, sigma_pi_power_uw, pi_area_pi: want finite and ≥ 0")
	}
	return nil
}

// YieldCurve is a tabulated photon yield per pulse against pulse area at
// fixed chirp and detuning, e.g. the biexciton yield n_xx(Θ) of the dot model
// at zero GDD. AreaPi must be increasing; a fine step (≤ 0.02 π) keeps the
// cubic interpolation well below the counting noise.
type YieldCurve struct {
	AreaPi []float64
	Yield  []float64
}

type curveSpline struct {
	sp     interp.NaturalCubic
	lo, hi float64
}

func (y YieldCurve) spline() (*curveSpline, error) {
	if len(y.AreaPi) != len(y.Yield) || len(y.AreaPi) < 4 {
		return nil, fmt.Errorf("yield curve: %d areas and %d yields: want equal lengths ≥ 4", len(y.AreaPi), len(y.Yield))
	}
	for i := range y.AreaPi {
		if !finite(y.AreaPi[i], y.Yield[i]) || (i > 0 && y.AreaPi[i] <= y.AreaPi[i-1]) {
			return nil, fmt.Errorf("yield curve: point %d (area %g π, yield %g): areas must be finite and increasing", i, y.AreaPi[i], y.Yield[i])
		}
	}
	s := &curveSpline{lo: y.AreaPi[0], hi: y.AreaPi[len(y.AreaPi)-1]}
	if err := s.sp.Fit(y.AreaPi, y.Yield); err != nil {
		return nil, fmt.Errorf("yield curve: %w", err)
	}
	return s, nil
}

// at returns the interpolated yield and its derivative; outside the table
// the end values are held (derivative 0).
func (s *curveSpline) at(a float64) (float64, float64) {
	switch {
	case a <= s.lo:
		return s.sp.Predict(s.lo), 0
	case a >= s.hi:
		return s.sp.Predict(s.hi), 0
	}
	return s.sp.Predict(a), s.sp.PredictDerivative(a)
}

// FirstMaximumAreaPi is the area of the first maximum of the curve: the
// first table point not lower than its neighbours whose yield is at least
// half the curve's largest, refined to the zero of the spline's derivative.
func (y YieldCurve) FirstMaximumAreaPi() (float64, error) {
	s, err := y.spline()
	if err != nil {
		return 0, err
	}
	top := math.Inf(-1)
	for _, v := range y.Yield {
		top = math.Max(top, v)
	}
	n := len(y.Yield)
	for i := 1; i < n-1; i++ {
		if y.Yield[i] >= y.Yield[i-1] && y.Yield[i] >= y.Yield[i+1] && y.Yield[i] >= top/2 {
			// Bisect the derivative on [a_{i−1}, a_{i+1}].
			a, b := y.AreaPi[i-1], y.AreaPi[i+1]
			_, da := s.at(a)
			if da <= 0 {
				return y.AreaPi[i], nil
			}
			for range 100 {
				m := (a + b) / 2
				if _, dm := s.at(m); dm > 0 {
					a = m
				} else {
					b = m
				}
			}
			return (a + b) / 2, nil
		}
	}
	return 0, errors.New("yield curve: no maximum inside the table (extend it past the first maximum)")
}

// PulseAreaFit is the pulse-area calibration fitted to a zero-chirp power
// sweep.
type PulseAreaFit struct {
	PulseArea
	// AmplitudeCounts is the counts per unit yield, BackgroundCounts the
	// counts at zero yield (dark counts and stray light), with 1σ errors.
	AmplitudeCounts       float64 `json:"amplitude_counts"`
	BackgroundCounts      float64 `json:"background_counts"`
	SigmaAmplitudeCounts  float64 `json:"sigma_amplitude_counts"`
	SigmaBackgroundCounts float64 `json:"sigma_background_counts"`
	// RedChiSq is χ²/DoF with Poisson weights; near 1 when the model fits.
	RedChiSq float64 `json:"red_chi_sq"`
	FitStats
}

// FitPulseArea fits counts(P) = A·n(s·sqrt(P)) + B to the counts of a power
// sweep at zero chirp, where n(Θ) is the model's yield curve (biexciton
// yield for the XX channel) and s = AreaPiPerSqrtUW. Weights are Poisson,
// σ² = max(counts, 1); the covariance is scaled by the reduced χ². The
// π-pulse power is (Θmax/s)² with Θmax the curve's first maximum, and its
// error 2·PiPowerUW·σs/s.
//
// The start of s comes from a scan over s (with A and B solved linearly at
// each s), so that the oscillating yield does not trap the fit in the wrong
// Rabi lobe; the sweep must reach past the first maximum.
func FitPulseArea(powersUW, counts []float64, curve YieldCurve) (PulseAreaFit, error) {
	if err := checkXY("power_uw", "counts", powersUW, counts, 5); err != nil {
		return PulseAreaFit{}, fmt.Errorf("pulse area fit: %w", err)
	}
	pmax := 0.0
	for i, p := range powersUW {
		if p < 0 {
			return PulseAreaFit{}, fmt.Errorf("pulse area fit: power_uw[%d] = %g: must be ≥ 0", i, p)
		}
		pmax = math.Max(pmax, p)
	}
	if pmax == 0 {
		return PulseAreaFit{}, errors.New("pulse area fit: all powers are 0")
	}
	sp, err := curve.spline()
	if err != nil {
		return PulseAreaFit{}, fmt.Errorf("pulse area fit: %w", err)
	}
	thMax, err := curve.FirstMaximumAreaPi()
	if err != nil {
		return PulseAreaFit{}, fmt.Errorf("pulse area fit: %w", err)
	}
	sigma := make([]float64, len(counts))
	for i, c := range counts {
		sigma[i] = math.Sqrt(math.Max(c, 1))
	}
	model := func(p, f, jac []float64) {
		s, a, b := p[0], p[1], p[2]
		for i, pw := range powersUW {
			r := math.Sqrt(pw)
			n, dn := sp.at(s * r)
			f[i] = a*n + b
			if jac != nil {
				jac[i*3+0] = a * dn * r
				jac[i*3+1] = n
				jac[i*3+2] = 1
			}
		}
	}
	// Scan s so that the largest swept area runs from 0.3 Θmax to the end of
	// the table; solve A, B by weighted linear least squares at each s.
	sHi := sp.hi / math.Sqrt(pmax)
	sLo := 0.3 * thMax / math.Sqrt(pmax)
	best, bestS, bestA, bestB := math.Inf(1), 0.0, 0.0, 0.0
	const steps = 400
	for k := 0; k <= steps; k++ {
		s := sLo * math.Pow(sHi/sLo, float64(k)/steps)
		a, b, chi := linearAB(powersUW, counts, sigma, func(r float64) float64 { n, _ := sp.at(s * r); return n })
		if a > 0 && chi < best {
			best, bestS, bestA, bestB = chi, s, a, b
		}
	}
	if math.IsInf(best, 1) {
		return PulseAreaFit{}, errors.New("pulse area fit: counts do not follow the yield curve at any area scale")
	}
	cf := curveFit{y: counts, sigma: sigma, model: model}
	r, err := cf.levenbergMarquardt([]float64{bestS, bestA, bestB})
	if err != nil {
		return PulseAreaFit{}, fmt.Errorf("pulse area fit: %w", err)
	}
	s, ss := r.P[0], r.Sigma[0]
	pi := (thMax / s) * (thMax / s)
	return PulseAreaFit{
		PulseArea: PulseArea{AreaPiPerSqrtUW: s, SigmaAreaPiPerSqrtUW: ss,
			PiPowerUW: pi, SigmaPiPowerUW: 2 * pi * ss / s, PiAreaPi: thMax},
		AmplitudeCounts: r.P[1], BackgroundCounts: r.P[2],
		SigmaAmplitudeCounts: r.Sigma[1], SigmaBackgroundCounts: r.Sigma[2],
		RedChiSq: r.ChiSq / float64(r.DoF),
		FitStats: newFitStats(r),
	}, nil
}

// linearAB solves counts ≈ A·n(sqrt(P)) + B by weighted least squares and
// returns A, B and χ² (+Inf when degenerate).
func linearAB(powersUW, counts, sigma []float64, n func(float64) float64) (a, b, chi float64) {
	var sw, sn, snn, sy, sny float64
	ns := make([]float64, len(powersUW))
	for i, p := range powersUW {
		w := 1 / (sigma[i] * sigma[i])
		ns[i] = n(math.Sqrt(p))
		sw += w
		sn += w * ns[i]
		snn += w * ns[i] * ns[i]
		sy += w * counts[i]
		sny += w * ns[i] * counts[i]
	}
	det := sw*snn - sn*sn
	if det <= 1e-12*sw*snn {
		return 0, 0, math.Inf(1)
	}
	a = (sw*sny - sn*sy) / det
	b = (sy - a*sn) / sw
	for i := range powersUW {
		d := (counts[i] - a*ns[i] - b) / sigma[i]
		chi += d * d
	}
	return a, b, chi
}
