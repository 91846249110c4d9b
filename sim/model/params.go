// Package model is the phonon-free model of a quantum dot under chirped
// two-photon excitation (PHYSICS.md §1–§2): a chirped Gaussian pulse drives
// the ladder ground G – exciton X – biexciton XX, with optional radiative
// decay of X and XX. It has no I/O.
//
// Everything is in ps, meV, rad/ps and ps². The Hamiltonian pieces (Pulse,
// Params.Ladder, Params.Hamiltonian, Ladder.Phase) are exported for solvers
// that add a bath on top of this model.
package model

import (
	"fmt"
	"math"
)

// Params of one point. Zero lifetimes mean no decay of that level.
type Params struct {
	FWHMPS       float64 // transform-limited intensity FWHM, ps
	GDDPS2       float64 // group-delay dispersion, ps² (positive = up-chirp)
	AreaPi       float64 // pulse area Θ of the TL pulse of the same energy, in units of π
	BindingMeV   float64 // biexciton binding energy E_B, meV
	DetuningMeV  float64 // per-photon laser detuning ΔL from the two-photon resonance, meV
	XLifetimePS  float64 // τ_X, ps (0: no decay)
	XXLifetimePS float64 // τ_XX, ps (0: no decay)
	Tolerance    float64 // solver tolerance (0: default, which gives populations to 1e-6)
}

// Result holds the populations at +6τ and the photon yields per pulse
// (PHYSICS.md §2):
//
//	n_xx = ρ_XX(end) + (1/τ_XX)·∫ρ_XX dt
//	n_x  = ρ_X(end) + ρ_XX(end) + (1/τ_X)·∫ρ_X dt
type Result struct{ G, X, XX, NX, NXX float64 }

// DemoParams is the invented demo dot of PHYSICS.md: E_B 4.1 meV, τ_X 270 ps,
// τ_XX 130 ps, TL FWHM 2.4 ps; GDD 0, area 1π, detuning 0.
func DemoParams() Params {
	return Params{
		FWHMPS:       2.4,
		GDDPS2:       0,
		AreaPi:       1,
		BindingMeV:   4.1,
		DetuningMeV:  0,
		XLifetimePS:  270,
		XXLifetimePS: 130,
	}
}

// Allowed ranges, checked by Validate. They bound the cost of one point as
// well as the physics: the number of solver steps grows with the phase the
// chirp and the detunings wind up over ±6τ, and a lifetime far below the
// pulse makes the problem stiff. At the corners of these ranges a point
// takes at most about 0.1 s.
const (
	MinFWHMPS     = 0.5
	MaxFWHMPS     = 50.0
	MaxAbsGDDPS2  = 100.0
	MaxAreaPi     = 40.0
	MaxAbsMeV     = 20.0 // binding energy and detuning
	MinLifetimePS = 1.0  // a non-zero lifetime
	MaxLifetimePS = 1e7
	MinTolerance  = 1e-13
	MaxTolerance  = 1e-3
)

// RangeError names a parameter, its value and the allowed range.
type RangeError struct {
	Field string
	Value float64
	Range string
}

func (e *RangeError) Error() string {
	return fmt.Sprintf("%s = %g is out of range: allowed %s", e.Field, e.Value, e.Range)
}

// Validate checks every field; the error names the field, the value and the
// allowed range.
func (p Params) Validate() error {
	bad := func(v, lo, hi float64) bool { return math.IsNaN(v) || math.IsInf(v, 0) || v < lo || v > hi }
	switch {
	case bad(p.FWHMPS, MinFWHMPS, MaxFWHMPS):
		return &RangeError{"FWHMPS", p.FWHMPS, fmt.Sprintf("%g to %g ps", MinFWHMPS, MaxFWHMPS)}
	case bad(p.GDDPS2, -MaxAbsGDDPS2, MaxAbsGDDPS2):
		return &RangeError{"GDDPS2", p.GDDPS2, fmt.Sprintf("-%g to %g ps²", MaxAbsGDDPS2, MaxAbsGDDPS2)}
	case bad(p.AreaPi, 0, MaxAreaPi):
		return &RangeError{"AreaPi", p.AreaPi, fmt.Sprintf("0 to %g (units of π)", MaxAreaPi)}
	case bad(p.BindingMeV, -MaxAbsMeV, MaxAbsMeV):
		return &RangeError{"BindingMeV", p.BindingMeV, fmt.Sprintf("-%g to %g meV", MaxAbsMeV, MaxAbsMeV)}
	case bad(p.DetuningMeV, -MaxAbsMeV, MaxAbsMeV):
		return &RangeError{"DetuningMeV", p.DetuningMeV, fmt.Sprintf("-%g to %g meV", MaxAbsMeV, MaxAbsMeV)}
	case p.XLifetimePS != 0 && bad(p.XLifetimePS, MinLifetimePS, MaxLifetimePS):
		return &RangeError{"XLifetimePS", p.XLifetimePS, fmt.Sprintf("0 (no decay) or %g to %g ps", MinLifetimePS, MaxLifetimePS)}
	case p.XXLifetimePS != 0 && bad(p.XXLifetimePS, MinLifetimePS, MaxLifetimePS):
		return &RangeError{"XXLifetimePS", p.XXLifetimePS, fmt.Sprintf("0 (no decay) or %g to %g ps", MinLifetimePS, MaxLifetimePS)}
	case p.Tolerance != 0 && bad(p.Tolerance, MinTolerance, MaxTolerance):
		return &RangeError{"Tolerance", p.Tolerance, fmt.Sprintf("0 (default %g) or %g to %g", DefaultTolerance, MinTolerance, MaxTolerance)}
	}
	return nil
}

func (p Params) tolerance() float64 {
	if p.Tolerance == 0 {
		return DefaultTolerance
	}
	return p.Tolerance
}

// Pulse is the driving pulse of p.
func (p Params) Pulse() Pulse { return NewPulse(p.FWHMPS, p.GDDPS2, p.AreaPi) }

// DetuningsRadPS are the static parts of the diagonal of H/ħ (PHYSICS.md §2):
// X at (E_B/2 − ΔL)/ħ and XX at −2ΔL/ħ, rad/ps.
func (p Params) DetuningsRadPS() (xRadPS, xxRadPS float64) {
	return (p.BindingMeV/2 - p.DetuningMeV) / HbarMeVPS, -2 * p.DetuningMeV / HbarMeVPS
}

// DecayRatesPerPS are 1/τ_X and 1/τ_XX (0 for a zero lifetime).
func (p Params) DecayRatesPerPS() (gX, gXX float64) {
	if p.XLifetimePS > 0 {
		gX = 1 / p.XLifetimePS
	}
	if p.XXLifetimePS > 0 {
		gXX = 1 / p.XXLifetimePS
	}
	return gX, gXX
}

// Ladder is the dot as the solver's problem: levels G=0, X=1, XX=2 in the
// frame rotating with the laser phase,
//
//	H/ħ = (E_B/2 − ΔL)/ħ·|X⟩⟨X| − (2ΔL/ħ)·|XX⟩⟨XX|
//	      − a·t·(|X⟩⟨X| + 2|XX⟩⟨XX|) − Ω(t)/2·(|G⟩⟨X| + |X⟩⟨XX| + h.c.),
//
// Lindblad decay XX→X at 1/τ_XX and X→G at 1/τ_X, from −6τ to +6τ.
func (p Params) Ladder() Ladder {
	pu := p.Pulse()
	return p.ladderWith(pu, pu)
}

func (p Params) ladderWith(pu Pulse, env Envelope) Ladder {
	dx, dxx := p.DetuningsRadPS()
	gx, gxx := p.DecayRatesPerPS()
	a := pu.ChirpRate()
	t0, t1 := pu.WindowPS()
	return Ladder{
		EnergyRadPS: [3]float64{0, dx, dxx},
		SweepRadPS2: [3]float64{0, -a, -2 * a},
		Coupling:    [2]float64{1, 1},
		Envelope:    env,
		DecayPerPS:  [2]float64{gx, gxx},
		StartPS:     t0,
		EndPS:       t1,
		MaxStepPS:   pu.TauPS(),
	}
}

// Hamiltonian fills h with H(t)/ħ in rad/ps in the basis G, X, XX (see
// Ladder): diagonal 0, (E_B/2 − ΔL)/ħ − a·t, −2ΔL/ħ − 2a·t; −Ω(t)/2 on the
// G–X and X–XX links. It does not allocate.
func (p Params) Hamiltonian(tPS float64, h *[3][3]complex128) {
	pu := p.Pulse()
	dx, dxx := p.DetuningsRadPS()
	a := pu.ChirpRate()
	w := complex(-0.5*pu.RabiAt(tPS), 0)
	*h = [3][3]complex128{
		{0, w, 0},
		{w, complex(dx-a*tPS, 0), w},
		{0, w, complex(dxx-2*a*tPS, 0)},
	}
}
