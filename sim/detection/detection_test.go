package detection

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"
)

// TestDeadTimeFormula: the measured rate is R/(1 + R·τd) for a
// non-paralysable detector (PHYSICS.md §3; Knoll, Radiation Detection and
// Measurement, 4th ed. 2010, ch. 4) — checked against a direct simulation
// of Poisson arrivals on a detector that is blind for τd after each count.
func TestDeadTimeFormula(t *testing.T) {
	c := Demo()
	c.DeadTimeNS = 50
	yields := []float64{4, 1}      // bright: R ≈ 1.9 MHz and 0.4 MHz
	trueR := c.TrueRatesHz(yields) // f_rep·η·n + dark
	if want := 80e6*0.006*4 + 150; trueR[0] != want {
		t.Fatalf("true rate %g, want f_rep·η·n + dark = %g", trueR[0], want)
	}
	got := c.RatesHz(yields)
	rng := rand.New(rand.NewPCG(1, 2))
	for ch, r := range trueR {
		if f := r / (1 + r*50e-9); math.Abs(got[ch]-f) > 1e-9*f {
			t.Errorf("channel %d: RatesHz %g, want %g", ch, got[ch], f)
		}
		// simulate 1 s of arrivals
		const span = 1.0
		td := c.DeadTimeNS * 1e-9
		var tt, lastCount float64 = 0, -1
		n := 0
		for {
			tt += rng.ExpFloat64() / r
			if tt > span {
				break
			}
			if tt-lastCount >= td {
				n++
				lastCount = tt
			}
		}
		sim := float64(n) / span
		// the count is close to Poisson with variance ≈ its mean (a bit less)
		if sigma := math.Sqrt(sim); math.Abs(sim-got[ch]) > 5*sigma {
			t.Errorf("channel %d: simulated dead-time rate %.0f/s, formula %.0f/s (σ %.0f)", ch, sim, got[ch], sigma)
		}
	}
}

func TestDemoChain(t *testing.T) {
	c := Demo()
	// PHYSICS.md demo dot: 80 MHz, 0.6 % and 0.5 %, dark 150 and 90 /s
	if c.RepRateHz != 80e6 || c.Efficiency[0] != 0.006 || c.Efficiency[1] != 0.005 || c.DarkHz[0] != 150 || c.DarkHz[1] != 90 {
		t.Errorf("Demo() = %+v", c)
	}
	// dark only when nothing is emitted
	r := c.RatesHz([]float64{0, 0})
	if math.Abs(r[0]-150/(1+150*25e-9)) > 1e-9 || math.Abs(r[1]-90/(1+90*25e-9)) > 1e-9 {
		t.Errorf("dark rates %v", r)
	}
}

// TestCountsReproducible: the same seed gives the same counts; counts scale
// with the gate.
func TestCountsReproducible(t *testing.T) {
	c := Demo()
	y := []float64{0.9, 0.8}
	a := c.Counts(rand.New(rand.NewPCG(5, 6)), y, 100*time.Millisecond, nil)
	b := c.Counts(rand.New(rand.NewPCG(5, 6)), y, 100*time.Millisecond, make([]uint64, 0, 2))
	if len(a) != 2 || a[0] != b[0] || a[1] != b[1] {
		t.Fatalf("same seed: %v vs %v", a, b)
	}
	r := c.RatesHz(y)
	for ch := range a {
		mean := r[ch] * 0.1
		if d := math.Abs(float64(a[ch]) - mean); d > 6*math.Sqrt(mean) {
			t.Errorf("channel %d: %d counts in 100 ms, mean %.0f", ch, a[ch], mean)
		}
	}
	if allocs := testing.AllocsPerRun(100, func() {
		b = c.Counts(rand.New(rand.NewPCG(5, 6)), y, time.Second, b)
	}); allocs > 1 { // the rand.Rand itself
		t.Errorf("Counts allocates %.0f times with a big enough out", allocs)
	}
}

// TestPoissonMoments: sample mean and variance of Poisson(μ) agree with μ
// within 5 standard errors (Var(mean) = μ/N, Var(s²) ≈ (μ + 2μ²)/N for a
// Poisson law), from small means (inversion) to 1e9 (PTRS).
func TestPoissonMoments(t *testing.T) {
	rng := rand.New(rand.NewPCG(42, 43))
	const n = 40000
	for _, mu := range []float64{0.3, 4.5, 9.99, 10, 31.7, 1234.5, 2.5e6, 1e9} {
		var s, s2 float64
		for range n {
			k := float64(Poisson(rng, mu))
			s += k
			s2 += k * k
		}
		mean := s / n
		v := (s2 - s*s/n) / (n - 1)
		if se := math.Sqrt(mu / n); math.Abs(mean-mu) > 5*se {
			t.Errorf("μ = %g: sample mean %.6g, |diff| %.3g > 5σ = %.3g", mu, mean, math.Abs(mean-mu), 5*se)
		}
		if se := math.Sqrt((mu + 2*mu*mu) / n); math.Abs(v-mu) > 5*se {
			t.Errorf("μ = %g: sample variance %.6g, |diff| %.3g > 5σ = %.3g", mu, v, math.Abs(v-mu), 5*se)
		}
	}
	if Poisson(rng, 0) != 0 || Poisson(rng, -1) != 0 || Poisson(rng, math.NaN()) != 0 {
		t.Error("Poisson of a non-positive mean is not 0")
	}
}

// TestPoissonDistribution: a χ² test of the whole distribution against the
// exact probabilities μ^k e^−μ / k! on both sides of the algorithm switch.
// The 0.1 % critical value of χ² for ν degrees of freedom is taken from the
// Wilson–Hilferty approximation (Wilson & Hilferty, PNAS 17, 684 (1931)).
func TestPoissonDistribution(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 10))
	const n = 200000
	for _, mu := range []float64{3.2, 12, 75, 600} {
		kmax := int(mu + 8*math.Sqrt(mu) + 10)
		counts := make([]float64, kmax+1)
		for range n {
			k := int(Poisson(rng, mu))
			if k > kmax {
				k = kmax
			}
			counts[k]++
		}
		// expected counts, merging tails with fewer than 5 expected
		var chi2 float64
		var bins int
		var obs, exp float64
		cum := 0.0
		for k := 0; k <= kmax; k++ {
			lg, _ := math.Lgamma(float64(k) + 1)
			p := math.Exp(float64(k)*math.Log(mu) - mu - lg)
			if k == kmax {
				p = 1 - cum
			}
			cum += p
			obs += counts[k]
			exp += p * n
			if exp >= 5 {
				chi2 += (obs - exp) * (obs - exp) / exp
				bins++
				obs, exp = 0, 0
			}
		}
		if exp > 0 {
			chi2 += (obs - exp) * (obs - exp) / exp
			bins++
		}
		nu := float64(bins - 1)
		const z = 3.090 // one-sided 0.1 % point of the standard normal
		crit := nu * math.Pow(1-2/(9*nu)+z*math.Sqrt(2/(9*nu)), 3)
		if chi2 > crit {
			t.Errorf("μ = %g: χ² = %.1f over %d bins, above the 0.1 %% critical value %.1f", mu, chi2, bins, crit)
		}
	}
}

func BenchmarkPoissonLarge(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 1))
	for b.Loop() {
		Poisson(rng, 3.7e5)
	}
}

func BenchmarkCounts(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 1))
	c := Demo()
	y := []float64{0.9, 0.95}
	out := make([]uint64, 0, 2)
	b.ReportAllocs()
	for b.Loop() {
		out = c.Counts(rng, y, 100*time.Millisecond, out)
	}
}
