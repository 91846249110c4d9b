// Package detection is the detection chain of PHYSICS.md §3: photon yields
// per pulse → mean count rates (repetition rate, efficiency, dark counts,
// non-paralysable dead time) → Poisson counts in a gate from a seeded source.
package detection

import (
	"math"
	"math/rand/v2"
	"time"
)

// Chain is the detection chain of PHYSICS.md §3 for one or more channels.
type Chain struct {
	RepRateHz  float64   // laser repetition rate
	Efficiency []float64 // total detection efficiency per channel (0..1)
	DarkHz     []float64 // dark count rate per channel, counts/s
	DeadTimeNS float64   // non-paralysable dead time, ns
}

// Demo is the chain of the invented demo dot: 80 MHz, X 0.6 %, XX 0.5 %, dark
// 150 and 90 /s, dead time 25 ns (within PHYSICS.md's typical range).
// Channel 0 is X, channel 1 is XX.
func Demo() Chain {
	return Chain{
		RepRateHz:  80e6,
		Efficiency: []float64{0.006, 0.005},
		DarkHz:     []float64{150, 90},
		DeadTimeNS: 25,
	}
}

// TrueRatesHz are the rates before dead time, R_c = f_rep·η_c·n_c + dark_c.
// Channels beyond len(yields) get only their dark rate.
func (c Chain) TrueRatesHz(yields []float64) []float64 {
	out := make([]float64, len(c.Efficiency))
	for i := range out {
		var n float64
		if i < len(yields) {
			n = yields[i]
		}
		out[i] = c.RepRateHz*c.Efficiency[i]*n + c.dark(i)
	}
	return out
}

func (c Chain) dark(i int) float64 {
	if i < len(c.DarkHz) {
		return c.DarkHz[i]
	}
	return 0
}

// RatesHz are the measured mean rates after a non-paralysable dead time,
// R/(1 + R·τd) (Knoll, Radiation Detection and Measurement, 4th ed., ch. 4).
func (c Chain) RatesHz(yields []float64) []float64 {
	out := c.TrueRatesHz(yields)
	td := c.DeadTimeNS * 1e-9
	for i, r := range out {
		out[i] = r / (1 + r*td)
	}
	return out
}

// Counts draws the counts of every channel in one gate: Poisson with mean
// RatesHz·gate. It appends to out[:0] (allocating only if out is short) and
// returns it. The same rng state gives the same counts.
func (c Chain) Counts(rng *rand.Rand, yields []float64, gate time.Duration, out []uint64) []uint64 {
	out = out[:0]
	td := c.DeadTimeNS * 1e-9
	sec := gate.Seconds()
	for i := range c.Efficiency {
		var n float64
		if i < len(yields) {
			n = yields[i]
		}
		r := c.RepRateHz*c.Efficiency[i]*n + c.dark(i)
		r /= 1 + r*td
		out = append(out, Poisson(rng, r*sec))
	}
	return out
}

// MaxPoissonMean is the largest mean Poisson accepts.
const MaxPoissonMean = 1e12

// Poisson draws one Poisson variate of mean mu. It is exact (no normal
// approximation): inversion by sequential search for mu < 10 and the
// transformed rejection method with squeeze, PTRS, above (Hörmann, Insurance:
// Mathematics and Economics 12, 39 (1993)), whose acceptance test uses
// log f(k) evaluated without cancellation. mu ≤ 0, NaN give 0; mu above
// MaxPoissonMean is clamped.
func Poisson(rng *rand.Rand, mu float64) uint64 {
	if !(mu > 0) {
		return 0
	}
	mu = min(mu, MaxPoissonMean)
	if mu < 10 {
		return poissonInversion(rng, mu)
	}
	return poissonPTRS(rng, mu)
}

func poissonInversion(rng *rand.Rand, mu float64) uint64 {
	u := rng.Float64()
	p := math.Exp(-mu)
	cum := p
	var k uint64
	for u > cum {
		k++
		p *= mu / float64(k)
		cum += p
		if p < 1e-300 && k > uint64(mu) {
			break // u within rounding of 1
		}
	}
	return k
}

func poissonPTRS(rng *rand.Rand, mu float64) uint64 {
	smu := math.Sqrt(mu)
	b := 0.931 + 2.53*smu
	a := -0.059 + 0.02483*b
	invAlpha := 1.1239 + 1.1328/(b-3.4)
	vr := 0.9277 - 3.6224/(b-2)
	for {
		u := rng.Float64() - 0.5
		v := rng.Float64()
		us := 0.5 - math.Abs(u)
		kf := math.Floor((2*a/us+b)*u + mu + 0.43)
		if us >= 0.07 && v <= vr {
			return uint64(kf)
		}
		if kf < 0 || (us < 0.013 && v > us) {
			continue
		}
		if math.Log(v*invAlpha/(a/(us*us)+b)) <= logPoissonPMF(kf, mu) {
			return uint64(kf)
		}
	}
}

// logPoissonPMF is log(mu^k e^-mu / k!) for integer k ≥ 0, written as
// k·log(mu/k) + (k − mu) − ½log(2πk) − δ(k) with δ the Stirling remainder,
// so that it keeps full precision when k and mu are large. log(mu) is
// taken only for small k: most calls (mu ≫ 20) never need it.
func logPoissonPMF(k, mu float64) float64 {
	if k < 20 {
		lg, _ := math.Lgamma(k + 1)
		return k*math.Log(mu) - mu - lg
	}
	d := (mu - k) / k
	return k*math.Log1p(d) + (k - mu) - 0.5*math.Log(2*math.Pi*k) - stirlingRemainder(k)
}

// stirlingRemainder is log(k!) − [(k+½)log k − k + ½log 2π], k ≥ 20
// (asymptotic series, error < 1e-17 there).
func stirlingRemainder(k float64) float64 {
	k2 := k * k
	return (1.0/12 - (1.0/360-(1.0/1260-1.0/(1680*k2))/k2)/k2) / k
}
