package calib

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// FitStats describes the quality of a least-squares calibration fit.
type FitStats struct {
	// Residuals are reading − fitted value, in the unit and order of the
	// readings (µW for the attenuator laws, ps for the stretcher fit).
	Residuals []float64 `json:"residuals"`
	// RMS of the residuals, in the unit of the readings.
	RMS float64 `json:"rms"`
	// MaxAbs is the largest |residual|.
	MaxAbs float64 `json:"max_abs"`
	// ChiSq is the sum of squared (weighted) residuals; DoF = readings − parameters.
	ChiSq float64 `json:"chi_sq"`
	DoF   int     `json:"dof"`
}

func newFitStats(r fitResult) FitStats {
	s := FitStats{Residuals: r.Residuals, RMS: rms(r.Residuals), ChiSq: r.ChiSq, DoF: r.DoF}
	for _, v := range r.Residuals {
		s.MaxAbs = math.Max(s.MaxAbs, math.Abs(v))
	}
	return s
}

// MalusFit is Malus's law fitted to power-meter readings over angle.
type MalusFit struct {
	Malus
	// Sigma holds the 1σ uncertainties of PMinUW, PMaxUW and Theta0Deg
	// (covariance scaled by the reduced χ², as SciPy's curve_fit does by default).
	Sigma Malus `json:"sigma"`
	FitStats
}

// FitMalus fits P(θ) = Pmin + (Pmax − Pmin)·cos²(2(θ − θ0)) (§5; Hecht, Optics,
// 5th ed., §8.2) to readings by unweighted least squares. The law is linear
// in (a, b, c) of a + b·cos 4θ + c·sin 4θ, which gives the start; the
// Levenberg–Marquardt polish in (Pmin, Pmax, θ0) gives the Jacobian for the
// uncertainties. The result has Pmax ≥ Pmin and θ0 in (−45°, 45°].
func FitMalus(anglesDeg, powersUW []float64) (MalusFit, error) {
	if err := checkXY("angle_deg", "power_uw", anglesDeg, powersUW, 4); err != nil {
		return MalusFit{}, fmt.Errorf("malus fit: %w", err)
	}
	n := len(anglesDeg)
	design := mat.NewDense(n, 3, nil)
	for i, th := range anglesDeg {
		u := 4 * th * math.Pi / 180
		design.Set(i, 0, 1)
		design.Set(i, 1, math.Cos(u))
		design.Set(i, 2, math.Sin(u))
	}
	var lin mat.VecDense
	if err := lin.SolveVec(design, mat.NewVecDense(n, append([]float64(nil), powersUW...))); err != nil {
		return MalusFit{}, fmt.Errorf("malus fit: angles do not determine the law (spread them over more than 45°): %w", err)
	}
	a, b, c := lin.AtVec(0), lin.AtVec(1), lin.AtVec(2)
	amp := math.Hypot(b, c)
	p0 := []float64{a - amp, a + amp, wrapDeg(math.Atan2(c, b)*45/math.Pi, 90)}
	cf := curveFit{y: powersUW, model: func(p, f, jac []float64) {
		m := Malus{PMinUW: p[0], PMaxUW: p[1], Theta0Deg: p[2]}
		for i, th := range anglesDeg {
			u := 2 * (th - m.Theta0Deg) * math.Pi / 180
			cs := math.Cos(u)
			f[i] = m.PMinUW + (m.PMaxUW-m.PMinUW)*cs*cs
			if jac != nil {
				jac[i*3+0] = 1 - cs*cs
				jac[i*3+1] = cs * cs
				jac[i*3+2] = (m.PMaxUW - m.PMinUW) * (2 * math.Pi / 180) * math.Sin(2*u)
			}
		}
	}}
	r, err := cf.levenbergMarquardt(p0)
	if err != nil {
		return MalusFit{}, fmt.Errorf("malus fit: %w", err)
	}
	out := MalusFit{
		Malus:    Malus{PMinUW: r.P[0], PMaxUW: r.P[1], Theta0Deg: r.P[2]},
		Sigma:    Malus{PMinUW: r.Sigma[0], PMaxUW: r.Sigma[1], Theta0Deg: r.Sigma[2]},
		FitStats: newFitStats(r),
	}
	if out.PMaxUW < out.PMinUW { // same law, θ0 shifted by 45°
		out.PMinUW, out.PMaxUW = out.PMaxUW, out.PMinUW
		out.Sigma.PMinUW, out.Sigma.PMaxUW = out.Sigma.PMaxUW, out.Sigma.PMinUW
		out.Theta0Deg += 45
	}
	out.Theta0Deg = wrapDeg(out.Theta0Deg, 90)
	return out, nil
}

// wrapDeg maps deg into (−period/2, period/2].
func wrapDeg(deg, period float64) float64 {
	d := math.Mod(deg, period)
	if d > period/2 {
		d -= period
	} else if d <= -period/2 {
		d += period
	}
	return d
}

// NDWheel is a graded neutral-density wheel: P(θ) = P0·10^(−OD(θ)) with OD
// linear in θ (§5), written as P(θ) = P0UW·10^(−ODPerDeg·θ). P0UW is the power
// the law gives at 0° (an optical density at 0° is absorbed into it).
// The law holds on the graded sector [MinDeg, MaxDeg].
type NDWheel struct {
	P0UW     float64 `json:"p0_uw"`
	ODPerDeg float64 `json:"od_per_deg"`
	MinDeg   float64 `json:"min_deg"`
	MaxDeg   float64 `json:"max_deg"`
}

// PowerUW is the power at angle deg.
func (w NDWheel) PowerUW(deg float64) float64 {
	return w.P0UW * math.Pow(10, -w.ODPerDeg*deg)
}

// AngleDeg inverts the law; powers that need an angle outside
// [MinDeg, MaxDeg] are an ErrRange error.
func (w NDWheel) AngleDeg(uw float64) (float64, error) {
	lo, hi := w.PowerUW(w.MinDeg), w.PowerUW(w.MaxDeg)
	if lo > hi {
		lo, hi = hi, lo
	}
	if math.IsNaN(uw) || uw <= 0 || uw < lo || uw > hi || w.ODPerDeg == 0 || !(w.P0UW > 0) {
		return 0, fmt.Errorf("power %g µW outside the ND wheel's range [%g, %g] µW: %w", uw, lo, hi, ErrRange)
	}
	return -math.Log10(uw/w.P0UW) / w.ODPerDeg, nil
}

// NDWheelFit is the ND-wheel law fitted to power-meter readings.
type NDWheelFit struct {
	NDWheel
	// Sigma holds the 1σ uncertainties of P0UW and ODPerDeg.
	Sigma NDWheel `json:"sigma"`
	FitStats
}

// FitNDWheel fits P(θ) = P0·10^(−k·θ) to readings by unweighted least squares
// in power (the power meter's noise is additive), starting from the straight
// line through log10 P. The graded sector is set to the range of the angles.
func FitNDWheel(anglesDeg, powersUW []float64) (NDWheelFit, error) {
	if err := checkXY("angle_deg", "power_uw", anglesDeg, powersUW, 3); err != nil {
		return NDWheelFit{}, fmt.Errorf("nd wheel fit: %w", err)
	}
	// Start: least-squares line through (θ, log10 P) of the positive readings.
	var sx, sy, sxx, sxy, cnt float64
	lo, hi := math.Inf(1), math.Inf(-1)
	for i, th := range anglesDeg {
		lo, hi = math.Min(lo, th), math.Max(hi, th)
		if powersUW[i] > 0 {
			ly := math.Log10(powersUW[i])
			sx, sy, sxx, sxy, cnt = sx+th, sy+ly, sxx+th*th, sxy+th*ly, cnt+1
		}
	}
	den := cnt*sxx - sx*sx
	if cnt < 2 || den == 0 {
		return NDWheelFit{}, errors.New("nd wheel fit: need positive readings at two or more different angles")
	}
	slope := (cnt*sxy - sx*sy) / den
	icpt := (sy - slope*sx) / cnt
	p0 := []float64{math.Pow(10, icpt), -slope}
	cf := curveFit{y: powersUW, model: func(p, f, jac []float64) {
		for i, th := range anglesDeg {
			t := math.Pow(10, -p[1]*th)
			f[i] = p[0] * t
			if jac != nil {
				jac[i*2+0] = t
				jac[i*2+1] = -p[0] * math.Ln10 * th * t
			}
		}
	}}
	r, err := cf.levenbergMarquardt(p0)
	if err != nil {
		return NDWheelFit{}, fmt.Errorf("nd wheel fit: %w", err)
	}
	return NDWheelFit{
		NDWheel:  NDWheel{P0UW: r.P[0], ODPerDeg: r.P[1], MinDeg: lo, MaxDeg: hi},
		Sigma:    NDWheel{P0UW: r.Sigma[0], ODPerDeg: r.Sigma[1]},
		FitStats: newFitStats(r),
	}, nil
}

// Attenuator is the angle ↔ power calibration of a bench's attenuator:
// exactly one of Malus (half-wave plate and polariser) or ND (graded wheel).
type Attenuator struct {
	Malus *Malus   `json:"malus,omitempty"`
	ND    *NDWheel `json:"nd_wheel,omitempty"`
}

// Validate checks that exactly one law is set and its numbers make sense.
func (a Attenuator) Validate() error {
	switch {
	case a.Malus != nil && a.ND != nil:
		return errors.New("attenuator: both malus and nd_wheel set, want exactly one")
	case a.Malus != nil:
		m := a.Malus
		if !finite(m.PMinUW, m.PMaxUW, m.Theta0Deg) || m.PMinUW < 0 || m.PMaxUW <= m.PMinUW {
			return fmt.Errorf("attenuator malus: p_min_uw %g, p_max_uw %g: want 0 ≤ p_min_uw < p_max_uw, finite theta0_deg", m.PMinUW, m.PMaxUW)
		}
	case a.ND != nil:
		w := a.ND
		if !finite(w.P0UW, w.ODPerDeg, w.MinDeg, w.MaxDeg) || w.P0UW <= 0 || w.ODPerDeg == 0 || w.MaxDeg <= w.MinDeg {
			return fmt.Errorf("attenuator nd_wheel: p0_uw %g, od_per_deg %g, sector [%g, %g] deg: want p0_uw > 0, od_per_deg ≠ 0, min_deg < max_deg", w.P0UW, w.ODPerDeg, w.MinDeg, w.MaxDeg)
		}
	default:
		return errors.New("attenuator: neither malus nor nd_wheel set, want exactly one")
	}
	return nil
}

// PowerUW is the power at angle deg through whichever law is set.
func (a Attenuator) PowerUW(deg float64) (float64, error) {
	if err := a.Validate(); err != nil {
		return 0, err
	}
	if a.Malus != nil {
		return a.Malus.PowerUW(deg), nil
	}
	return a.ND.PowerUW(deg), nil
}

// AngleDeg is the angle that gives power uw.
func (a Attenuator) AngleDeg(uw float64) (float64, error) {
	if err := a.Validate(); err != nil {
		return 0, err
	}
	if a.Malus != nil {
		return a.Malus.AngleDeg(uw)
	}
	return a.ND.AngleDeg(uw)
}

// AngleWithinDeg is an angle in [minDeg, maxDeg] that gives power uw: for
// a half-wave plate the one of its equivalent angles in the range (see
// Malus.AngleWithinDeg), for an ND wheel its only angle, if in the range.
func (a Attenuator) AngleWithinDeg(uw, minDeg, maxDeg float64) (float64, error) {
	if err := a.Validate(); err != nil {
		return 0, err
	}
	if a.Malus != nil {
		return a.Malus.AngleWithinDeg(uw, minDeg, maxDeg)
	}
	deg, err := a.ND.AngleDeg(uw)
	if err != nil {
		return 0, err
	}
	if deg < minDeg || deg > maxDeg {
		return 0, fmt.Errorf("power %g µW needs the ND wheel at %.4g°, outside the allowed %g–%g°: %w", uw, deg, minDeg, maxDeg, ErrRange)
	}
	return deg, nil
}

func finite(v ...float64) bool {
	for _, x := range v {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return false
		}
	}
	return true
}
