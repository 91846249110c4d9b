package calib

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"sort"
)

// fwhmPerHalfWidth converts the 1/e half-width τ of a Gaussian field
// envelope exp(−t²/(2τ²)) to the FWHM of its intensity exp(−t²/τ²): 2·sqrt(ln 2).
var fwhmPerHalfWidth = 2 * math.Sqrt(math.Ln2)

// ChirpedFWHMPS is the intensity FWHM of a Gaussian pulse of transform-limited
// FWHM tlFWHMPS after a GDD gddPS2 (§1; Diels & Rudolph, Ultrashort Laser
// Pulse Phenomena, 2nd ed., ch. 1): τ = sqrt(τ0² + φ2²/τ0²).
func ChirpedFWHMPS(tlFWHMPS, gddPS2 float64) float64 {
	t0 := tlFWHMPS / fwhmPerHalfWidth
	return fwhmPerHalfWidth * math.Sqrt(t0*t0+gddPS2*gddPS2/(t0*t0))
}

// GDDFromFWHMPS inverts ChirpedFWHMPS for |GDD|: |φ2| = τ0·sqrt(τ² − τ0²).
// A duration shorter than the transform limit is an ErrRange error.
func GDDFromFWHMPS(tlFWHMPS, fwhmPS float64) (float64, error) {
	if !(tlFWHMPS > 0) || fwhmPS < tlFWHMPS || math.IsNaN(fwhmPS) {
		return 0, fmt.Errorf("duration %g ps below the transform limit %g ps: %w", fwhmPS, tlFWHMPS, ErrRange)
	}
	t0, t := tlFWHMPS/fwhmPerHalfWidth, fwhmPS/fwhmPerHalfWidth
	return t0 * math.Sqrt(t*t-t0*t0), nil
}

// StretcherFit is the stretcher calibration fitted to measured pulse
// durations over stage position.
type StretcherFit struct {
	// SlopePS2PerMM is |dGDD/dx|: durations do not tell the sign of the chirp.
	SlopePS2PerMM float64 `json:"slope_ps2_per_mm"`
	ZeroMM        float64 `json:"zero_mm"`
	TLFWHMPS      float64 `json:"tl_fwhm_ps"`
	// 1σ uncertainties (covariance scaled by the reduced χ²).
	SigmaSlopePS2PerMM float64 `json:"sigma_slope_ps2_per_mm"`
	SigmaZeroMM        float64 `json:"sigma_zero_mm"`
	SigmaTLFWHMPS      float64 `json:"sigma_tl_fwhm_ps"`
	FitStats
}

// FitStretcher fits the duration model of §1 with GDD linear in stage
// position, FWHM(x) = 2√ln2·sqrt(τ0² + (k·(x − x0))²/τ0²), to pairs of stage
// position (mm) and measured intensity FWHM of the pulse (ps). Three
// parameters: |k| (ps²/mm), x0 (mm) and the transform-limited FWHM 2√ln2·τ0.
// Durations from a Gaussian intensity autocorrelation must be divided by √2
// first (the autocorrelation of a Gaussian is √2 wider). The readings must
// straddle or approach x0 closely enough to resolve the transform limit.
func FitStretcher(stageMM, fwhmPS []float64) (StretcherFit, error) {
	if err := checkXY("stage_mm", "fwhm_ps", stageMM, fwhmPS, 4); err != nil {
		return StretcherFit{}, fmt.Errorf("stretcher fit: %w", err)
	}
	for i, f := range fwhmPS {
		if f <= 0 {
			return StretcherFit{}, fmt.Errorf("stretcher fit: fwhm_ps[%d] = %g: must be > 0", i, f)
		}
	}
	// Start: x0 and τ0 from the shortest pulse, |k| from a line through the
	// origin of |φ2| against |x − x0|.
	idx := make([]int, len(stageMM))
	for i := range idx {
		idx[i] = i
	}
	sort.Slice(idx, func(a, b int) bool { return fwhmPS[idx[a]] < fwhmPS[idx[b]] })
	x0, tl := stageMM[idx[0]], fwhmPS[idx[0]]
	var sxy, sxx float64
	for i, x := range stageMM {
		if phi, err := GDDFromFWHMPS(tl, fwhmPS[i]); err == nil {
			dx := math.Abs(x - x0)
			sxy += dx * phi
			sxx += dx * dx
		}
	}
	if sxx == 0 || sxy == 0 {
		return StretcherFit{}, errors.New("stretcher fit: durations do not change with stage position")
	}
	k0 := sxy / sxx
	return fitStretcher(stageMM, fwhmPS, []float64{k0, x0, tl}, 0)
}

// FitStretcherWithTL is FitStretcher with the transform-limited FWHM known
// (e.g. from the laser's own autocorrelation at zero dispersion): two
// parameters, |k| and x0; SigmaTLFWHMPS is 0.
func FitStretcherWithTL(stageMM, fwhmPS []float64, tlFWHMPS float64) (StretcherFit, error) {
	if !(tlFWHMPS > 0) || math.IsInf(tlFWHMPS, 0) {
		return StretcherFit{}, fmt.Errorf("stretcher fit: tl_fwhm_ps %g: want > 0", tlFWHMPS)
	}
	if err := checkXY("stage_mm", "fwhm_ps", stageMM, fwhmPS, 3); err != nil {
		return StretcherFit{}, fmt.Errorf("stretcher fit: %w", err)
	}
	// Start: x0 at the shortest pulse, |k| from |φ2| against |x − x0|.
	imin := 0
	for i, f := range fwhmPS {
		if f < fwhmPS[imin] {
			imin = i
		}
	}
	x0 := stageMM[imin]
	var sxy, sxx float64
	for i, x := range stageMM {
		if phi, err := GDDFromFWHMPS(tlFWHMPS, fwhmPS[i]); err == nil {
			dx := math.Abs(x - x0)
			sxy += dx * phi
			sxx += dx * dx
		}
	}
	if sxx == 0 || sxy == 0 {
		return StretcherFit{}, errors.New("stretcher fit: durations do not rise above the transform limit away from the shortest pulse")
	}
	return fitStretcher(stageMM, fwhmPS, []float64{sxy / sxx, x0}, tlFWHMPS)
}

// fitStretcher runs the least squares from p0 = (k, x0[, TL FWHM]); with
// two parameters the TL FWHM is fixed at tl.
func fitStretcher(stageMM, fwhmPS, p0 []float64, tl float64) (StretcherFit, error) {
	np := len(p0)
	cf := curveFit{y: fwhmPS, model: func(p, f, jac []float64) {
		k, xz := p[0], p[1]
		t0 := tl / fwhmPerHalfWidth
		if np == 3 {
			t0 = p[2] / fwhmPerHalfWidth
		}
		for i, x := range stageMM {
			q := k * (x - xz)
			s := t0*t0 + q*q/(t0*t0)
			rs := math.Sqrt(s)
			f[i] = fwhmPerHalfWidth * rs
			if jac != nil {
				jac[i*np+0] = fwhmPerHalfWidth * q * (x - xz) / (t0 * t0 * rs)
				jac[i*np+1] = -fwhmPerHalfWidth * q * k / (t0 * t0 * rs)
				if np == 3 {
					jac[i*np+2] = (t0 - q*q/(t0*t0*t0)) / rs
				}
			}
		}
	}}
	r, err := cf.levenbergMarquardt(p0)
	if err != nil {
		return StretcherFit{}, fmt.Errorf("stretcher fit: %w", err)
	}
	out := StretcherFit{
		SlopePS2PerMM: math.Abs(r.P[0]), ZeroMM: r.P[1], TLFWHMPS: tl,
		SigmaSlopePS2PerMM: r.Sigma[0], SigmaZeroMM: r.Sigma[1],
		FitStats: newFitStats(r),
	}
	if np == 3 {
		out.TLFWHMPS, out.SigmaTLFWHMPS = math.Abs(r.P[2]), r.Sigma[2]
	}
	return out, nil
}

// Apply returns geom with the fitted zero position and with the lever
// rescaled so that its slope equals the fitted one (the effective lever
// absorbs the geometry's error); sign (±1) is the chirp sign the durations
// cannot tell, taken from geom when 0.
func (f StretcherFit) Apply(geom Stretcher, sign int) (Stretcher, error) {
	k, err := geom.SlopePS2PerMM()
	if err != nil {
		return Stretcher{}, fmt.Errorf("stretcher fit: apply: %w", err)
	}
	out := geom
	out.Lever = geom.Lever * f.SlopePS2PerMM / math.Abs(k)
	out.ZeroMM = f.ZeroMM
	if sign != 0 {
		out.Sign = sign
	}
	return out, nil
}

// stretcherJSON is the wire form of Stretcher: NaN cannot be written in
// JSON, so a Littrow stretcher leaves incidence_deg out.
type stretcherJSON struct {
	LinesPerMM   float64  `json:"lines_per_mm"`
	WavelengthNM float64  `json:"wavelength_nm"`
	IncidenceDeg *float64 `json:"incidence_deg,omitempty"`
	Littrow      bool     `json:"littrow"`
	Order        int      `json:"order,omitempty"`
	Passes       int      `json:"passes"`
	Lever        float64  `json:"lever"`
	ZeroMM       float64  `json:"zero_mm"`
	Sign         int      `json:"sign,omitempty"`
}

// MarshalJSON writes the stretcher with unit-named fields.
func (s Stretcher) MarshalJSON() ([]byte, error) {
	j := stretcherJSON{LinesPerMM: s.LinesPerMM, WavelengthNM: s.WavelengthNM, Littrow: s.Littrow,
		Order: s.Order, Passes: s.Passes, Lever: s.Lever, ZeroMM: s.ZeroMM, Sign: s.Sign}
	if !s.Littrow && !math.IsNaN(s.IncidenceDeg) {
		inc := s.IncidenceDeg
		j.IncidenceDeg = &inc
	}
	return json.Marshal(j)
}

// UnmarshalJSON reads the form MarshalJSON writes (unknown fields are an
// error); a missing incidence_deg means Littrow.
func (s *Stretcher) UnmarshalJSON(b []byte) error {
	var j stretcherJSON
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&j); err != nil {
		return fmt.Errorf("stretcher: %w", err)
	}
	*s = Stretcher{LinesPerMM: j.LinesPerMM, WavelengthNM: j.WavelengthNM, Littrow: j.Littrow,
		Order: j.Order, Passes: j.Passes, Lever: j.Lever, ZeroMM: j.ZeroMM, Sign: j.Sign, IncidenceDeg: math.NaN()}
	if j.IncidenceDeg != nil {
		s.IncidenceDeg = *j.IncidenceDeg
	} else {
		s.Littrow = true
	}
	return nil
}

// Validate checks the stretcher's numbers; errors name the field, the value
// and the allowed range.
func (s Stretcher) Validate() error {
	switch {
	case !(s.LinesPerMM > 0) || math.IsInf(s.LinesPerMM, 0):
		return fmt.Errorf("stretcher: lines_per_mm %g: want > 0", s.LinesPerMM)
	case !(s.WavelengthNM > 0) || math.IsInf(s.WavelengthNM, 0):
		return fmt.Errorf("stretcher: wavelength_nm %g: want > 0", s.WavelengthNM)
	case s.Passes <= 0:
		return fmt.Errorf("stretcher: passes %d: want ≥ 1", s.Passes)
	case !(s.Lever > 0) || math.IsInf(s.Lever, 0):
		return fmt.Errorf("stretcher: lever %g: want > 0", s.Lever)
	case !finite(s.ZeroMM):
		return fmt.Errorf("stretcher: zero_mm %g: want a finite position", s.ZeroMM)
	case s.Sign < -1 || s.Sign > 1:
		return fmt.Errorf("stretcher: sign %d: want -1, 0 (= +1) or +1", s.Sign)
	case s.Order < 0:
		return fmt.Errorf("stretcher: order %d: want ≥ 0 (0 means 1)", s.Order)
	case !s.Littrow && math.IsInf(s.IncidenceDeg, 0):
		return fmt.Errorf("stretcher: incidence_deg %g: want a finite angle", s.IncidenceDeg)
	}
	if _, err := s.SlopePS2PerMM(); err != nil {
		return err
	}
	return nil
}
