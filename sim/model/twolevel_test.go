package model

import (
	"math"
	"math/cmplx"
	"testing"
)

// The exact two-level limits of PHYSICS.md §2, run through the same solver as
// the dot: a Ladder with the X–XX link switched off (Coupling[1] = 0).

type sechEnvelope struct{ amp, tPS float64 }

func (e sechEnvelope) RabiAt(t float64) float64 { return e.amp / math.Cosh(t/e.tPS) }

type gaussEnvelope struct{ amp, sigmaPS float64 }

func (e gaussEnvelope) RabiAt(t float64) float64 {
	return e.amp * math.Exp(-t*t/(2*e.sigmaPS*e.sigmaPS))
}

// cos² pulse of total duration 2T (compact support).
type cos2Envelope struct{ amp, halfPS float64 }

func (e cos2Envelope) RabiAt(t float64) float64 {
	if math.Abs(t) >= e.halfPS {
		return 0
	}
	c := math.Cos(math.Pi * t / (2 * e.halfPS))
	return e.amp * c * c
}

type constEnvelope float64

func (e constEnvelope) RabiAt(float64) float64 { return float64(e) }

func twoLevel(env Envelope, detuningRadPS, t0, t1, maxStep float64) Ladder {
	return Ladder{
		EnergyRadPS: [3]float64{0, detuningRadPS, 0},
		Coupling:    [2]float64{1, 0},
		Envelope:    env,
		StartPS:     t0,
		EndPS:       t1,
		MaxStepPS:   maxStep,
	}
}

// TestPulseAreaTheorem: a resonant pulse of any shape leaves P_e = sin²(Θ/2)
// — Allen & Eberly, Optical Resonance and Two-Level Atoms (1975).
func TestPulseAreaTheorem(t *testing.T) {
	s := NewSolver()
	for _, areaPi := range []float64{0.5, 1, 1.7, 2, 3.25, 6.5} {
		theta := areaPi * math.Pi
		shapes := map[string]struct {
			env    Envelope
			t0, t1 float64
		}{
			// ∫ amp·exp(−t²/2σ²) dt = amp·σ·sqrt(2π); window ±12σ
			"gauss": {gaussEnvelope{theta / (1.3 * math.Sqrt(2*math.Pi)), 1.3}, -12 * 1.3, 12 * 1.3},
			// ∫ amp·sech(t/T) dt = amp·π·T; window ±45T (tail below 1e-19)
			"sech": {sechEnvelope{theta / (math.Pi * 0.8), 0.8}, -45 * 0.8, 45 * 0.8},
			// ∫ amp·cos²(πt/2T) dt over ±T = amp·T
			"cos2": {cos2Envelope{theta / 2.5, 2.5}, -2.5, 2.5},
		}
		for name, sh := range shapes {
			l := twoLevel(sh.env, 0, sh.t0, sh.t1, 0.5)
			r, err := s.SolveLadder(&l, 1e-10)
			if err != nil {
				t.Fatal(err)
			}
			want := math.Pow(math.Sin(theta/2), 2)
			if got := real(r.Rho[1][1]); math.Abs(got-want) > 1e-5 {
				t.Errorf("%s, Θ = %gπ: P_e = %.9f, want sin²(Θ/2) = %.9f", name, areaPi, got, want)
			}
		}
	}
}

// TestRosenZener: Ω(t) = (Θ/(πT))·sech(t/T) at constant detuning Δ gives
// P_e = sin²(Θ/2)·sech²(πΔT/2) — Rosen & Zener, Phys. Rev. 40, 502 (1932).
func TestRosenZener(t *testing.T) {
	s := NewSolver()
	const tPS = 1.1
	for _, c := range []struct{ areaPi, delta float64 }{
		{1, 0.3}, {1, 1.2}, {2.5, 0.7}, {0.6, -0.9}, {3, 2.0},
	} {
		theta := c.areaPi * math.Pi
		l := twoLevel(sechEnvelope{theta / (math.Pi * tPS), tPS}, c.delta, -45*tPS, 45*tPS, tPS)
		r, err := s.SolveLadder(&l, 1e-10)
		if err != nil {
			t.Fatal(err)
		}
		sech := 1 / math.Cosh(math.Pi*c.delta*tPS/2)
		want := math.Pow(math.Sin(theta/2), 2) * sech * sech
		got := real(r.Rho[1][1])
		t.Logf("Θ = %gπ, Δ = %g: P_e = %.10f, exact %.10f", c.areaPi, c.delta, got, want)
		if math.Abs(got-want) > 1e-5 {
			t.Errorf("Θ = %gπ, Δ = %g rad/ps: P_e = %.9f, want %.9f", c.areaPi, c.delta, got, want)
		}
	}
}

// TestLandauZener: H = (α·t/2)σz + (Ω/2)σx with constant Ω, t from −∞ to ∞,
// leaves the diabatic state with probability 1 − exp(−π·Ω²/(2|α|)) — Zener,
// Proc. R. Soc. A 137, 696 (1932). In the frame of the ladder (level 0 at
// energy 0) the diabatic energies are 0 and −α·t. The infinite times are
// approached by starting in the adiabatic state at −T and projecting on the
// adiabatic states at +T: the remaining finite-time error falls as 1/T³
// (checked here by comparing two windows).
func TestLandauZener(t *testing.T) {
	s := NewSolver()
	adiabatic := func(om, alpha, tt float64) (lower, upper [3]complex128) {
		// H = [[0, −Ω/2], [−Ω/2, −α·t]]
		a, b, d := 0.0, -om/2, -alpha*tt
		mid, rad := (a+d)/2, math.Hypot((a-d)/2, b)
		for k, e := range []float64{mid - rad, mid + rad} {
			// (H − e)v = 0 → v = (−b, a − e) normalised
			v0, v1 := -b, a-e
			n := math.Hypot(v0, v1)
			v := [3]complex128{complex(v0/n, 0), complex(v1/n, 0), 0}
			if k == 0 {
				lower = v
			} else {
				upper = v
			}
		}
		return lower, upper
	}
	for _, c := range []struct{ om, alpha float64 }{
		{0.5, 0.4}, {0.3, 1.0}, {1.0, 1.5}, {0.8, -0.6},
	} {
		want := math.Exp(-math.Pi * c.om * c.om / (2 * math.Abs(c.alpha)))
		var got [2]float64
		for w, tEnd := range []float64{150, 300} {
			tEnd /= math.Sqrt(math.Abs(c.alpha))
			lo0, up0 := adiabatic(c.om, c.alpha, -tEnd)
			_, up1 := adiabatic(c.om, c.alpha, tEnd)
			lo1, _ := adiabatic(c.om, c.alpha, tEnd)
			// start in the adiabatic state that is diabatic |0⟩ at −∞:
			// |0⟩ has energy 0, |1⟩ has −α·t; for α > 0 at t → −∞ |0⟩ is lower
			start, end := lo0, up1
			if c.alpha < 0 {
				start, end = up0, lo1
			}
			l := Ladder{
				SweepRadPS2: [3]float64{0, -c.alpha, 0},
				Coupling:    [2]float64{1, 0},
				Envelope:    constEnvelope(c.om),
				StartPS:     -tEnd,
				EndPS:       tEnd,
				Initial:     start,
			}
			r, err := s.SolveLadder(&l, 1e-11)
			if err != nil {
				t.Fatal(err)
			}
			// ⟨end|ρ|end⟩: probability of staying diabatic
			var p complex128
			for j := range 2 {
				for k := range 2 {
					p += cmplx.Conj(end[j]) * r.Rho[j][k] * end[k]
				}
			}
			got[w] = real(p)
		}
		t.Logf("Ω = %g, α = %g: P = %.10f, %.10f, exact %.10f", c.om, c.alpha, got[0], got[1], want)
		if math.Abs(got[1]-want) > 1e-5 || math.Abs(got[0]-want) > 1e-5 {
			t.Errorf("Ω = %g, α = %g: diabatic P = %.9f (T=150/√α), %.9f (T=300/√α), want exp(−πΩ²/2|α|) = %.9f",
				c.om, c.alpha, got[0], got[1], want)
		}
	}
}
