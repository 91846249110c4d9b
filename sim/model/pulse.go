package model

import "math"

// HbarMeVPS is the reduced Planck constant in meV·ps (CODATA 2018).
const HbarMeVPS = 0.6582119569

// Pulse is a chirped Gaussian pulse (PHYSICS.md §1): a transform-limited
// pulse of intensity FWHM F stretched by a quadratic spectral phase (GDD φ2).
//
//	τ0 = F/(2·sqrt(ln 2))            TL 1/e field half-width
//	τ  = sqrt(τ0² + φ2²/τ0²)         chirped 1/e field half-width
//	a  = φ2/(τ0⁴ + φ2²)              chirp rate, ω(t) = ωL + a·t
//	Ω(t) = Θ/sqrt(2π·τ0·τ)·exp(−t²/(2τ²))
//
// Θ is the area of the TL pulse of the same energy; the chirped pulse keeps
// the energy (∫Ω² dt), not the area. Positive GDD is an up-chirp.
// Sources: Diels & Rudolph, Ultrashort Laser Pulse Phenomena (2006), ch. 1;
// Malinovsky & Krause, Eur. Phys. J. D 14, 147 (2001).
type Pulse struct {
	fwhmPS, gddPS2, areaPi float64
	tau0PS, tauPS          float64
	chirpRadPS2            float64 // a
	peakRadPS              float64 // Ω(0)
	inv2Tau2               float64 // 1/(2τ²)
}

// NewPulse makes the pulse of TL intensity FWHM fwhmPS (ps), GDD gddPS2 (ps²)
// and TL pulse area areaPi (units of π). It does not validate: see Params.Validate.
func NewPulse(fwhmPS, gddPS2, areaPi float64) Pulse {
	tau0 := fwhmPS / (2 * math.Sqrt(math.Ln2))
	tau02 := tau0 * tau0
	tau := math.Sqrt(tau02 + gddPS2*gddPS2/tau02)
	return Pulse{
		fwhmPS:      fwhmPS,
		gddPS2:      gddPS2,
		areaPi:      areaPi,
		tau0PS:      tau0,
		tauPS:       tau,
		chirpRadPS2: gddPS2 / (tau02*tau02 + gddPS2*gddPS2),
		peakRadPS:   areaPi * math.Pi / math.Sqrt(2*math.Pi*tau0*tau),
		inv2Tau2:    1 / (2 * tau * tau),
	}
}

// FWHMPS is the transform-limited intensity FWHM, ps.
func (p Pulse) FWHMPS() float64 { return p.fwhmPS }

// GDDPS2 is the group-delay dispersion, ps².
func (p Pulse) GDDPS2() float64 { return p.gddPS2 }

// AreaPi is the TL pulse area Θ in units of π.
func (p Pulse) AreaPi() float64 { return p.areaPi }

// Tau0PS is the TL 1/e field half-width τ0, ps.
func (p Pulse) Tau0PS() float64 { return p.tau0PS }

// TauPS is the chirped 1/e field half-width τ, ps.
func (p Pulse) TauPS() float64 { return p.tauPS }

// ChirpedFWHMPS is the intensity FWHM of the chirped pulse, ps.
func (p Pulse) ChirpedFWHMPS() float64 { return 2 * math.Sqrt(math.Ln2) * p.tauPS }

// ChirpRate is a in ω(t) = ωL + a·t, rad/ps².
func (p Pulse) ChirpRate() float64 { return p.chirpRadPS2 }

// PeakRabi is Ω(0), rad/ps.
func (p Pulse) PeakRabi() float64 { return p.peakRadPS }

// RabiAt is the Rabi envelope Ω(t), rad/ps.
func (p Pulse) RabiAt(tPS float64) float64 { return p.peakRadPS * math.Exp(-tPS*tPS*p.inv2Tau2) }

// FrequencyOffsetAt is the instantaneous laser frequency minus the carrier,
// ω(t) − ωL = a·t, rad/ps.
func (p Pulse) FrequencyOffsetAt(tPS float64) float64 { return p.chirpRadPS2 * tPS }

// WindowPS is the integration window of PHYSICS.md §2, −6τ to +6τ.
func (p Pulse) WindowPS() (startPS, endPS float64) { return -6 * p.tauPS, 6 * p.tauPS }
