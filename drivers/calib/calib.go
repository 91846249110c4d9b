// Package calib holds the calibrations that turn raw instrument units into
// the physics of the experiment: stage millimetres ↔ GDD (grating stretcher,
// PHYSICS.md §4), attenuator degrees ↔ average power (§5), and wavelength ↔
// energy (§6). No I/O; every formula names its published source.
package calib

import (
	"errors"
	"fmt"
	"math"
)

// Physical constants (CODATA 2018).
const (
	HbarMeVps = 0.6582119569  // ħ, meV·ps
	HcEVnm    = 1239.84198    // hc, eV·nm
	CmmPerPs  = 0.299792458   // speed of light, mm/ps
	HcMeVnm   = HcEVnm * 1000 // hc, meV·nm
)

// Stretcher maps a stage position to GDD for a grating stretcher:
//
//	GDD(x) = s·N·k·(x − x0)·λ³ / (2π·c²·d²·cos²θd)
//
// Treacy, IEEE J. Quantum Electron. QE-5, 454 (1969) for the grating pair;
// Martinez, IEEE J. Quantum Electron. QE-23, 59 (1987) for the displaced
// grating of a 4f stretcher acting as a pair of separation Δz.
type Stretcher struct {
	LinesPerMM   float64 // groove density 1/d, lines/mm
	WavelengthNM float64 // centre wavelength λ, nm
	// IncidenceDeg is the angle of incidence θi; NaN or Littrow=true means Littrow.
	IncidenceDeg float64
	Littrow      bool
	Order        int     // diffraction order m (0 means 1)
	Passes       int     // N
	Lever        float64 // k, mm of grating displacement per mm of stage travel
	ZeroMM       float64 // x0, stage position of zero dispersion, mm
	Sign         int     // s = ±1 (0 means +1)
}

// DiffractionDeg returns the diffraction angle θd from the grating equation
// sin θi + sin θd = m·λ/d (in Littrow θi = θd = asin(mλ/2d)).
func (s Stretcher) DiffractionDeg() (float64, error) {
	m := float64(s.order())
	mld := m * s.WavelengthNM * 1e-6 * s.LinesPerMM // m·λ/d, λ in mm
	if s.Littrow || math.IsNaN(s.IncidenceDeg) {
		if mld/2 > 1 {
			return 0, fmt.Errorf("stretcher: no Littrow angle for %g lines/mm at %g nm", s.LinesPerMM, s.WavelengthNM)
		}
		return math.Asin(mld/2) * 180 / math.Pi, nil
	}
	sd := mld - math.Sin(s.IncidenceDeg*math.Pi/180)
	if sd < -1 || sd > 1 {
		return 0, fmt.Errorf("stretcher: no diffracted order %d at incidence %g°", s.order(), s.IncidenceDeg)
	}
	return math.Asin(sd) * 180 / math.Pi, nil
}

func (s Stretcher) order() int {
	if s.Order == 0 {
		return 1
	}
	return s.Order
}

func (s Stretcher) sign() float64 {
	if s.Sign < 0 {
		return -1
	}
	return 1
}

// SlopePS2PerMM is dGDD/dx in ps² per mm of stage travel.
func (s Stretcher) SlopePS2PerMM() (float64, error) {
	if s.LinesPerMM <= 0 || s.WavelengthNM <= 0 || s.Passes <= 0 || s.Lever <= 0 {
		return 0, errors.New("stretcher: lines/mm, wavelength, passes and lever must be > 0")
	}
	thd, err := s.DiffractionDeg()
	if err != nil {
		return 0, err
	}
	cos := math.Cos(thd * math.Pi / 180)
	lam := s.WavelengthNM * 1e-6 // mm
	d := 1 / s.LinesPerMM        // mm
	m := float64(s.order())
	// m²·λ³/(2π·c²·d²·cos²θd) per mm of grating separation; c in mm/ps → ps²/mm.
	per := m * m * lam * lam * lam / (2 * math.Pi * CmmPerPs * CmmPerPs * d * d * cos * cos)
	return s.sign() * float64(s.Passes) * s.Lever * per, nil
}

// GDDPS2 is the GDD at stage position mm.
func (s Stretcher) GDDPS2(mm float64) (float64, error) {
	l, err := s.Line()
	if err != nil {
		return 0, err
	}
	return l.GDDPS2(mm), nil
}

// PositionMM is the stage position that gives gdd.
func (s Stretcher) PositionMM(gddPS2 float64) (float64, error) {
	l, err := s.Line()
	if err != nil {
		return 0, err
	}
	return l.PositionMM(gddPS2), nil
}

// StretcherLine is a stretcher's linear stage → GDD law with its slope
// already computed (the slope takes a grating-equation asin and a cos):
// for a hot loop over one stretcher. Its results equal the Stretcher's bit
// for bit.
type StretcherLine struct {
	SlopePS2PerMM float64
	ZeroMM        float64
}

// Line is the stretcher's law with its slope computed once.
func (s Stretcher) Line() (StretcherLine, error) {
	k, err := s.SlopePS2PerMM()
	if err != nil {
		return StretcherLine{}, err
	}
	return StretcherLine{SlopePS2PerMM: k, ZeroMM: s.ZeroMM}, nil
}

// GDDPS2 is the GDD at stage position mm.
func (l StretcherLine) GDDPS2(mm float64) float64 { return l.SlopePS2PerMM * (mm - l.ZeroMM) }

// PositionMM is the stage position that gives gdd.
func (l StretcherLine) PositionMM(gddPS2 float64) float64 { return l.ZeroMM + gddPS2/l.SlopePS2PerMM }

// Malus is the half-wave plate before a polariser:
//
//	P(θ) = Pmin + (Pmax − Pmin)·cos²(2(θ − θ0))
//
// (Malus's law; Hecht, Optics, 5th ed., §8.2).
type Malus struct {
	PMinUW    float64 `json:"p_min_uw"`   // extinction floor, µW
	PMaxUW    float64 `json:"p_max_uw"`   // full transmission, µW
	Theta0Deg float64 `json:"theta0_deg"` // angle of maximum transmission, deg
}

// PowerUW is the power at angle deg.
func (m Malus) PowerUW(deg float64) float64 {
	c := math.Cos(2 * (deg - m.Theta0Deg) * math.Pi / 180)
	return m.PMinUW + (m.PMaxUW-m.PMinUW)*c*c
}

// AngleDeg is the angle in [θ0, θ0+45°] that gives power uw (the branch from
// full transmission down to extinction). Powers outside [Pmin, Pmax] are an error.
func (m Malus) AngleDeg(uw float64) (float64, error) {
	if math.IsNaN(uw) || uw < m.PMinUW || uw > m.PMaxUW {
		return 0, fmt.Errorf("power %g µW outside the attenuator's range [%g, %g] µW: %w", uw, m.PMinUW, m.PMaxUW, ErrRange)
	}
	if m.PMaxUW == m.PMinUW {
		return m.Theta0Deg, nil
	}
	c2 := (uw - m.PMinUW) / (m.PMaxUW - m.PMinUW)
	return m.Theta0Deg + math.Acos(math.Sqrt(c2))*90/math.Pi, nil
}

// AngleWithinDeg is an angle in [minDeg, maxDeg] that gives power uw. The
// law repeats every 90° and is symmetric about θ0, so a power has the
// angles θ0 ± a + k·90°: AngleDeg's (θ0 + a) when it is in the range, else
// the one in the range nearest to it. None in the range is an ErrRange error.
func (m Malus) AngleWithinDeg(uw, minDeg, maxDeg float64) (float64, error) {
	deg, err := m.AngleDeg(uw)
	if err != nil {
		return 0, err
	}
	if deg >= minDeg && deg <= maxDeg {
		return deg, nil
	}
	a := deg - m.Theta0Deg
	best, found := 0.0, false
	for _, base := range [2]float64{m.Theta0Deg + a, m.Theta0Deg - a} {
		// every base + k·90° in [minDeg, maxDeg]
		for k := math.Ceil((minDeg - base) / 90); base+k*90 <= maxDeg; k++ {
			c := base + k*90
			if c < minDeg {
				continue
			}
			if !found || math.Abs(c-deg) < math.Abs(best-deg) {
				best, found = c, true
			}
		}
	}
	if !found {
		return 0, fmt.Errorf("power %g µW needs an attenuator angle of %.4g° ± k·90° or %.4g° ± k·90°, none in the allowed %g–%g°: %w",
			uw, deg, m.Theta0Deg-a, minDeg, maxDeg, ErrRange)
	}
	return best, nil
}

// ErrRange marks a value outside a calibration's range.
var ErrRange = errors.New("outside the calibrated range")

// EnergyMeV converts a vacuum wavelength to photon energy: E = hc/λ (§6).
func EnergyMeV(nm float64) float64 { return HcMeVnm / nm }

// SplittingMeV converts a small line spacing dnm at wavelength nm to an
// energy difference: ΔE ≈ hc·Δλ/λ² (§6).
func SplittingMeV(dnm, atNM float64) float64 { return HcMeVnm * dnm / (atNM * atNM) }

// SplittingNM is the inverse of SplittingMeV.
func SplittingNM(dmev, atNM float64) float64 { return dmev * atNM * atNM / HcMeVnm }

// DetuningMeV is the laser detuning per photon from a two-photon resonance,
// both given as vacuum wavelengths: ΔL = hc/λL − hc/λres (§6).
func DetuningMeV(laserNM, resonanceNM float64) float64 {
	return HcMeVnm/laserNM - HcMeVnm/resonanceNM
}

// LaserNM is the laser wavelength that gives detuning dmev from the
// two-photon resonance at resonanceNM (inverse of DetuningMeV).
func LaserNM(dmev, resonanceNM float64) float64 {
	return HcMeVnm / (HcMeVnm/resonanceNM + dmev)
}
