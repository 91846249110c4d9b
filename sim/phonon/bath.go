package phonon

import (
	"fmt"
	"math"
)

// HbarMeVPS is the reduced Planck constant in meV·ps (CODATA 2018, PHYSICS.md).
const HbarMeVPS = 0.6582119569

// BoltzmannMeVPerK is k_B in meV/K (PHYSICS.md §7).
const BoltzmannMeVPerK = 0.08617333

// Limits of the bath parameters accepted by Validate. They bound the physics
// of weak coupling to acoustic phonons in a dot, not any instrument.
const (
	MaxAlphaPS2     = 1.0   // far beyond any GaAs dot (≈ 0.03 ps²)
	MinCutoffMeV    = 0.01  // ħωc below this is no deformation-potential bath
	MaxCutoffMeV    = 20.0  //
	MaxTemperatureK = 400.0 // room temperature and a margin
)

// Bath is the weak-coupling longitudinal-acoustic phonon bath of PHYSICS.md §7:
// spectral density J(ω) = α·ω³·exp(−ω²/ωc²) coupled through
// S = |X⟩⟨X| + 2|XX⟩⟨XX|, thermally occupied at the sample temperature.
type Bath struct {
	// AlphaPS2 is the coupling α, ps². 0 turns the phonons off.
	AlphaPS2 float64
	// CutoffMeV is the cutoff energy ħωc, meV.
	CutoffMeV float64
	// TemperatureK is the sample (lattice) temperature, K. 0 is allowed: only
	// spontaneous phonon emission remains.
	TemperatureK float64
}

// DemoBath returns the phonons of the demo dot of PHYSICS.md: α 0.030 ps²,
// ħωc 1.2 meV, sample at 4.2 K.
func DemoBath() Bath {
	return Bath{AlphaPS2: 0.030, CutoffMeV: 1.2, TemperatureK: 4.2}
}

// Active reports whether b couples at all: a nil bath or α = 0 is no bath,
// and the solver then returns the plain model's result bit for bit.
func (b *Bath) Active() bool { return b != nil && b.AlphaPS2 != 0 }

// Validate checks the fields of an active bath. Errors name the field, the
// value and the allowed range.
func (b *Bath) Validate() error {
	if b == nil {
		return nil
	}
	if !(b.AlphaPS2 >= 0 && b.AlphaPS2 <= MaxAlphaPS2) {
		return fmt.Errorf("phonon bath: alpha_ps2 %g outside [0, %g]", b.AlphaPS2, MaxAlphaPS2)
	}
	if b.AlphaPS2 == 0 {
		return nil
	}
	if !(b.CutoffMeV >= MinCutoffMeV && b.CutoffMeV <= MaxCutoffMeV) {
		return fmt.Errorf("phonon bath: cutoff_mev %g outside [%g, %g]", b.CutoffMeV, MinCutoffMeV, MaxCutoffMeV)
	}
	if !(b.TemperatureK >= 0 && b.TemperatureK <= MaxTemperatureK) {
		return fmt.Errorf("phonon bath: temperature_k %g outside [0, %g]", b.TemperatureK, MaxTemperatureK)
	}
	return nil
}

// spectrum holds the bath in the units of the solver (rad/ps).
type spectrum struct {
	twoPiAlpha float64 // 2π·α, ps²
	invWc2     float64 // 1/ωc², ps²
	invKT      float64 // ħ/(k_B·T), ps; +Inf at T = 0
}

func newSpectrum(b *Bath) spectrum {
	wc := b.CutoffMeV / HbarMeVPS
	sp := spectrum{twoPiAlpha: 2 * math.Pi * b.AlphaPS2, invWc2: 1 / (wc * wc), invKT: math.Inf(1)}
	if b.TemperatureK > 0 {
		sp.invKT = HbarMeVPS / (BoltzmannMeVPerK * b.TemperatureK)
	}
	return sp
}

// SpectrumPerPS is the bath spectrum S(ω) of PHYSICS.md §7 at angular
// frequency ω (rad/ps), in 1/ps: for ω > 0 (the system gives ħω to the bath,
// emission) 2π·J(ω)·(n(ω)+1), for ω < 0 (absorption) 2π·J(|ω|)·n(|ω|), and 0
// at ω = 0. A dressed-state transition i → j has the rate |⟨j|S|i⟩|²·S(ω_ij)
// with ω_ij = (E_i − E_j)/ħ.
func (b *Bath) SpectrumPerPS(omegaRadPS float64) float64 {
	if !b.Active() {
		return 0
	}
	sp := newSpectrum(b)
	s, _ := sp.pair(omegaRadPS)
	return s
}

// pair returns S(ω) and S(−ω) for ω ≥ 0 or ω < 0 alike, sharing the
// exponentials: J(|ω|)·(n+1) and J(|ω|)·n, assigned to the signs of ω.
func (sp *spectrum) pair(w float64) (sPlus, sMinus float64) {
	if w == 0 {
		return 0, 0
	}
	aw := math.Abs(w)
	j := sp.twoPiAlpha * aw * aw * aw * math.Exp(-aw*aw*sp.invWc2)
	var emit, absorb float64
	if math.IsInf(sp.invKT, 1) {
		emit, absorb = j, 0
	} else {
		// n+1 = 1/(1 − e^−x), n = e^−x/(1 − e^−x). For x > 1e-3, 1 − e^−x
		// loses at most 1e-13 relative to cancellation; below, Expm1.
		x := aw * sp.invKT
		em := math.Exp(-x)
		den := 1 - em
		if x < 1e-3 {
			den = -math.Expm1(-x)
		}
		emit, absorb = j/den, j*em/den
	}
	if w > 0 {
		return emit, absorb
	}
	return absorb, emit
}
