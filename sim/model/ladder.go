package model

import (
	"fmt"
	"math"
)

// Envelope is a real Rabi envelope Ω(t) in rad/ps. Pulse is one; the
// two-level checks use other shapes through the same solver.
type Envelope interface {
	RabiAt(tPS float64) float64
}

// Ladder is the problem the solver integrates: a three-level ladder 0–1–2
// with real nearest-neighbour couplings and diagonal energies linear in time,
// in a frame where level 0 has energy 0:
//
//	H/ħ = Σ_j (E_j + S_j·t)|j⟩⟨j| − Ω(t)/2·(k01·|0⟩⟨1| + k12·|1⟩⟨2| + h.c.)
//
// with optional Lindblad decay sqrt(γ1)|0⟩⟨1| and sqrt(γ2)|1⟩⟨2|. The dot
// (Params.Ladder) is G=0, X=1, XX=2; a two-level problem sets Coupling[1]=0.
type Ladder struct {
	// EnergyRadPS are E_j (rad/ps); EnergyRadPS[0] must be 0.
	EnergyRadPS [3]float64
	// SweepRadPS2 are S_j (rad/ps²); SweepRadPS2[0] must be 0.
	SweepRadPS2 [3]float64
	// Coupling are the weights k01, k12 of Ω on the two links.
	Coupling [2]float64
	// Envelope is Ω(t), rad/ps.
	Envelope Envelope
	// DecayPerPS are γ1 (1→0) and γ2 (2→1), 1/ps; 0 means no decay.
	DecayPerPS [2]float64
	// StartPS and EndPS bound the integration.
	StartPS, EndPS float64
	// MaxStepPS bounds the step (0: no bound beyond the window). Set it to the
	// time scale of the envelope so that no step can skip over a pulse.
	MaxStepPS float64
	// Initial is the state at StartPS (lab frame); all zero means |0⟩.
	Initial [3]complex128
}

// LadderResult is the state at EndPS.
type LadderResult struct {
	// Rho is the density matrix at EndPS in the frame of H above.
	Rho [3][3]complex128
	// Decayed are γ1·∫ρ11 dt and γ2·∫ρ22 dt over the window: the number of
	// photons emitted on the 1→0 and 2→1 transitions.
	Decayed [2]float64
	// Steps and Rejected count accepted and rejected solver steps.
	Steps, Rejected int
}

// Phase returns φ_j(t) = E_j·t + S_j·t²/2, the integral of level j's energy,
// used by the interaction picture of the solver.
func (l *Ladder) Phase(j int, tPS float64) float64 {
	return l.EnergyRadPS[j]*tPS + 0.5*l.SweepRadPS2[j]*tPS*tPS
}

// HamiltonianAt fills h with H(t)/ħ (rad/ps) in the basis 0, 1, 2.
func (l *Ladder) HamiltonianAt(tPS float64, h *[3][3]complex128) {
	w := 0.5 * l.Envelope.RabiAt(tPS)
	*h = [3][3]complex128{}
	for j := range 3 {
		h[j][j] = complex(l.EnergyRadPS[j]+l.SweepRadPS2[j]*tPS, 0)
	}
	h[0][1] = complex(-l.Coupling[0]*w, 0)
	h[1][0] = h[0][1]
	h[1][2] = complex(-l.Coupling[1]*w, 0)
	h[2][1] = h[1][2]
}

func (l *Ladder) check() error {
	if l.Envelope == nil {
		return fmt.Errorf("ladder: no envelope")
	}
	if l.EnergyRadPS[0] != 0 || l.SweepRadPS2[0] != 0 {
		return fmt.Errorf("ladder: level 0 must have zero energy and sweep")
	}
	if !(l.EndPS > l.StartPS) || math.IsInf(l.EndPS-l.StartPS, 0) {
		return fmt.Errorf("ladder: window %g to %g ps is empty or infinite", l.StartPS, l.EndPS)
	}
	for i, g := range l.DecayPerPS {
		if g < 0 || math.IsNaN(g) || math.IsInf(g, 0) {
			return fmt.Errorf("ladder: decay rate %d is %g, want a finite value ≥ 0", i+1, g)
		}
	}
	return nil
}
