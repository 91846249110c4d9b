package model

import (
	"math"
	"testing"
)

func relErr(got, want float64) float64 { return math.Abs(got-want) / math.Abs(want) }

// TestPulseCheckValues checks the §1 check values of PHYSICS.md (Diels &
// Rudolph, Ultrashort Laser Pulse Phenomena, 2nd ed. 2006, ch. 1; Malinovsky &
// Krause, Eur. Phys. J. D 14, 147 (2001)): F = 2 ps, φ2 = 20 ps² → τ0 =
// 1.2011 ps, τ = 16.694 ps, chirped FWHM 27.80 ps, a = 0.04974 rad/ps².
func TestPulseCheckValues(t *testing.T) {
	p := NewPulse(2, 20, 1)
	for _, c := range []struct {
		name      string
		got, want float64
	}{
		{"tau0", p.Tau0PS(), 1.2011},
		{"tau", p.TauPS(), 16.694},
		{"chirped FWHM", p.ChirpedFWHMPS(), 27.80},
		{"chirp rate", p.ChirpRate(), 0.04974},
	} {
		if e := relErr(c.got, c.want); e > 1e-4 {
			t.Errorf("%s = %.6g, want %.6g (relative error %.2g > 1e-4)", c.name, c.got, c.want, e)
		}
	}
	// up-chirp: frequency rises in time for positive GDD
	if p.FrequencyOffsetAt(1) <= p.FrequencyOffsetAt(-1) {
		t.Errorf("positive GDD gives a down-chirp: ω(1)−ω(−1) = %g", p.FrequencyOffsetAt(1)-p.FrequencyOffsetAt(-1))
	}
	if n := NewPulse(2, -20, 1); n.ChirpRate() != -p.ChirpRate() || n.TauPS() != p.TauPS() {
		t.Errorf("GDD sign: a(−20) = %g, τ(−20) = %g; want −a(20), τ(20)", n.ChirpRate(), n.TauPS())
	}
}

// TestPulseAreaAndEnergy checks the normalisation of Ω(t): the TL pulse has
// area Θ (∫Ω dt = Θ), and the chirped pulse keeps the energy, ∫Ω² dt equal to
// that of the TL pulse (§1: "energy conserved"). Quadrature by the
// trapezoidal rule, which converges exponentially for a Gaussian.
func TestPulseAreaAndEnergy(t *testing.T) {
	integral := func(p Pulse, pow int) float64 {
		const n = 20000
		t0, t1 := -12*p.TauPS(), 12*p.TauPS()
		h := (t1 - t0) / n
		var s float64
		for i := 0; i <= n; i++ {
			v := math.Pow(p.RabiAt(t0+float64(i)*h), float64(pow))
			if i == 0 || i == n {
				v /= 2
			}
			s += v
		}
		return s * h
	}
	tl := NewPulse(2.4, 0, 3)
	if a := integral(tl, 1); relErr(a, 3*math.Pi) > 1e-10 {
		t.Errorf("TL area = %.12g, want 3π = %.12g", a, 3*math.Pi)
	}
	e0 := integral(tl, 2)
	for _, gdd := range []float64{-30, -5, 1, 20} {
		if e := integral(NewPulse(2.4, gdd, 3), 2); relErr(e, e0) > 1e-10 {
			t.Errorf("GDD %g: ∫Ω² = %.12g, want the TL value %.12g", gdd, e, e0)
		}
	}
}

// TestHamiltonian checks Params.Hamiltonian against PHYSICS.md §2 written
// out by hand for one instant, and against the Ladder the solver uses.
func TestHamiltonian(t *testing.T) {
	p := DemoParams()
	p.GDDPS2, p.AreaPi, p.DetuningMeV = 12, 3, 0.3
	const tt = 4.0
	pu := NewPulse(2.4, 12, 3)
	a := pu.ChirpRate()
	om := pu.RabiAt(tt)
	want := [3][3]float64{
		{0, -om / 2, 0},
		{-om / 2, (4.1/2-0.3)/HbarMeVPS - a*tt, -om / 2},
		{0, -om / 2, -2*0.3/HbarMeVPS - 2*a*tt},
	}
	var h, hl [3][3]complex128
	p.Hamiltonian(tt, &h)
	l := p.Ladder()
	l.HamiltonianAt(tt, &hl)
	for i := range 3 {
		for j := range 3 {
			if d := math.Abs(real(h[i][j]) - want[i][j]); d > 1e-12 || imag(h[i][j]) != 0 || h[i][j] != hl[i][j] {
				t.Errorf("H[%d][%d] = %v (ladder %v), want %g", i, j, h[i][j], hl[i][j], want[i][j])
			}
		}
	}
	if n := testing.AllocsPerRun(10, func() { p.Hamiltonian(tt, &h) }); n != 0 {
		t.Errorf("Hamiltonian allocates %.0f times", n)
	}
}
