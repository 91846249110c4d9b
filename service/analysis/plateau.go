// Package analysis holds pure functions over measured data: the robustness
// of the adiabatic plateau of a power × chirp map, the model fit of a whole
// map, the pulse-area calibration from a power sweep, and the point-by-point
// comparison of two scans. No I/O beyond the io.Writer a caller passes, no
// gRPC, no store.
package analysis

import (
	"errors"
	"fmt"
	"math"
)

// PowerChirpMap is one counter channel of a power × chirp map.
type PowerChirpMap struct {
	// GDDPS2 is the chirp axis (any order).
	GDDPS2 []float64
	// PowerUW is the power axis, strictly increasing, > 0.
	PowerUW []float64
	// Counts[i][j] is the count at GDDPS2[i], PowerUW[j]; NaN marks a point
	// not measured (an unfinished scan).
	Counts [][]float64
}

// Validate checks the shape and the axes.
func (m PowerChirpMap) Validate() error {
	if len(m.GDDPS2) == 0 || len(m.PowerUW) < 3 {
		return fmt.Errorf("map: %d chirps × %d powers: want ≥ 1 chirp and ≥ 3 powers", len(m.GDDPS2), len(m.PowerUW))
	}
	if len(m.Counts) != len(m.GDDPS2) {
		return fmt.Errorf("map: %d count rows for %d chirps: must match", len(m.Counts), len(m.GDDPS2))
	}
	for i, g := range m.GDDPS2 {
		if math.IsNaN(g) || math.IsInf(g, 0) {
			return fmt.Errorf("map: gdd_ps2[%d] = %g: must be finite", i, g)
		}
		if len(m.Counts[i]) != len(m.PowerUW) {
			return fmt.Errorf("map: row %d (gdd %g ps²) has %d counts for %d powers: must match", i, g, len(m.Counts[i]), len(m.PowerUW))
		}
		for j, c := range m.Counts[i] {
			if math.IsInf(c, 0) {
				return fmt.Errorf("map: counts[%d][%d] = %g: must be finite or NaN (missing)", i, j, c)
			}
		}
	}
	for j, p := range m.PowerUW {
		if !(p > 0) || math.IsInf(p, 0) || (j > 0 && p <= m.PowerUW[j-1]) {
			return fmt.Errorf("map: power_uw[%d] = %g: powers must be finite, > 0 and strictly increasing", j, p)
		}
	}
	return nil
}

// PlateauOptions tunes Plateaus.
type PlateauOptions struct {
	// Fraction of the plateau that counts as "on the plateau" (0 means 0.9).
	Fraction float64
	// BackgroundCounts is subtracted before any ratio (dark counts); 0 if unknown.
	BackgroundCounts float64
	// AmplitudeCounts, when > 0, is the counts of one photon per pulse above
	// the background (from FitMap): the π-pulse fidelity is then
	// (counts − background)/amplitude, the yield the model calibrates.
	AmplitudeCounts float64
}

// ChirpPlateau is the plateau analysis of one chirp.
type ChirpPlateau struct {
	GDDPS2 float64 `json:"gdd_ps2"`
	// PlateauCounts is the plateau level: the largest value of the smoothed
	// curve, reached at PlateauPowerUW.
	PlateauCounts  float64 `json:"plateau_counts"`
	PlateauPowerUW float64 `json:"plateau_power_uw"`
	// FirstMaxPowerUW, FirstMaxCounts: the first maximum of the smoothed
	// curve (see Plateaus) and the raw counts there.
	FirstMaxPowerUW float64 `json:"first_max_power_uw"`
	FirstMaxCounts  float64 `json:"first_max_counts"`
	// LowUW … HighUW is the power interval around PlateauPowerUW over which
	// the smoothed curve stays ≥ Fraction × plateau (after subtracting the
	// background), with edges interpolated linearly between powers.
	LowUW  float64 `json:"low_uw"`
	HighUW float64 `json:"high_uw"`
	// RangeUW = HighUW − LowUW; RangeDecades = log10(HighUW/LowUW).
	RangeUW      float64 `json:"range_uw"`
	RangeDecades float64 `json:"range_decades"`
	// OpenLow/OpenHigh: the interval reaches the first/last power of the
	// scan, so the true range may be wider.
	OpenLow  bool `json:"open_low"`
	OpenHigh bool `json:"open_high"`
}

// PlateauReport is the robustness analysis of a power × chirp map.
type PlateauReport struct {
	Fraction float64        `json:"fraction"`
	Chirps   []ChirpPlateau `json:"chirps"` // in the order of the map's GDD axis
	// Best is the index in Chirps of the most robust chirp: the widest
	// RangeUW among the chirps whose plateau is at least Fraction × the
	// highest plateau of the map (a flat but low curve is not robust
	// inversion); ties go to the smaller |GDD|.
	Best       int     `json:"best"`
	BestGDDPS2 float64 `json:"best_gdd_ps2"`
	// Zero is the index of the chirp closest to zero GDD, ZeroGDDPS2 its GDD.
	Zero       int     `json:"zero"`
	ZeroGDDPS2 float64 `json:"zero_gdd_ps2"`
	// PiFidelity is the biexciton yield of the π pulse at zero chirp:
	// (FirstMaxCounts − background) of the zero chirp divided by
	// AmplitudeCounts when given (FidelityReference "model amplitude"),
	// otherwise by (PlateauCounts − background) of the best chirp
	// ("best plateau"): how close the Rabi π pulse comes to what the
	// adiabatic passage reaches.
	PiFidelity        float64 `json:"pi_fidelity"`
	FidelityReference string  `json:"fidelity_reference"`
}

// Plateaus analyses a biexciton (XX) power × chirp map.
//
// For each chirp the counts over power are smoothed with the binomial
// weights (1, 2, 1)/4 over neighbouring power indices (missing neighbours
// skipped, end points from the available neighbours; a missing point stays
// missing and ends a plateau range). The first maximum is
// the first smoothed value not lower than its neighbours and at least half
// the curve's largest (low-power noise bumps do not count). The plateau is
// the largest smoothed value: at zero chirp that is usually the π-pulse peak
// itself; at a chirp that inverts adiabatically it is the saturated level.
func Plateaus(m PowerChirpMap, opt PlateauOptions) (PlateauReport, error) {
	if err := m.Validate(); err != nil {
		return PlateauReport{}, err
	}
	frac := opt.Fraction
	if frac == 0 {
		frac = 0.9
	}
	if !(frac > 0 && frac < 1) {
		return PlateauReport{}, fmt.Errorf("plateau: fraction %g: want 0 < fraction < 1", opt.Fraction)
	}
	if opt.AmplitudeCounts < 0 || math.IsNaN(opt.AmplitudeCounts) || math.IsNaN(opt.BackgroundCounts) {
		return PlateauReport{}, fmt.Errorf("plateau: amplitude %g, background %g counts: want amplitude ≥ 0 and both finite", opt.AmplitudeCounts, opt.BackgroundCounts)
	}
	rep := PlateauReport{Fraction: frac, Chirps: make([]ChirpPlateau, len(m.GDDPS2)), Best: -1}
	bg := opt.BackgroundCounts
	top := math.Inf(-1)
	for i, g := range m.GDDPS2 {
		c, err := chirpPlateau(m.PowerUW, m.Counts[i], frac, bg)
		if err != nil {
			return PlateauReport{}, fmt.Errorf("plateau: gdd %g ps²: %w", g, err)
		}
		c.GDDPS2 = g
		rep.Chirps[i] = c
		top = math.Max(top, c.PlateauCounts-bg)
		if math.Abs(g) < math.Abs(m.GDDPS2[rep.Zero]) {
			rep.Zero = i
		}
	}
	for i, c := range rep.Chirps {
		if c.PlateauCounts-bg < frac*top {
			continue
		}
		if rep.Best < 0 || c.RangeUW > rep.Chirps[rep.Best].RangeUW ||
			(c.RangeUW == rep.Chirps[rep.Best].RangeUW && math.Abs(c.GDDPS2) < math.Abs(rep.Chirps[rep.Best].GDDPS2)) {
			rep.Best = i
		}
	}
	rep.BestGDDPS2 = rep.Chirps[rep.Best].GDDPS2
	rep.ZeroGDDPS2 = m.GDDPS2[rep.Zero]
	z := rep.Chirps[rep.Zero]
	if opt.AmplitudeCounts > 0 {
		rep.PiFidelity = (z.FirstMaxCounts - bg) / opt.AmplitudeCounts
		rep.FidelityReference = "model amplitude"
	} else {
		ref := rep.Chirps[rep.Best].PlateauCounts - bg
		if ref <= 0 {
			return PlateauReport{}, errors.New("plateau: no counts above the background anywhere in the map")
		}
		rep.PiFidelity = (z.FirstMaxCounts - bg) / ref
		rep.FidelityReference = "best plateau"
	}
	return rep, nil
}

// smooth applies (1, 2, 1)/4 weights, skipping NaN neighbours; a missing
// point stays missing.
func smooth(y []float64) []float64 {
	out := make([]float64, len(y))
	for j := range y {
		if math.IsNaN(y[j]) {
			out[j] = math.NaN()
			continue
		}
		var s, w float64
		for d, wt := range [3]float64{1, 2, 1} {
			k := j + d - 1
			if k < 0 || k >= len(y) || math.IsNaN(y[k]) {
				continue
			}
			s += wt * y[k]
			w += wt
		}
		out[j] = math.NaN()
		if w > 0 {
			out[j] = s / w
		}
	}
	return out
}

func chirpPlateau(p, counts []float64, frac, bg float64) (ChirpPlateau, error) {
	s := smooth(counts)
	var c ChirpPlateau
	imax := -1
	for j, v := range s {
		if !math.IsNaN(v) && (imax < 0 || v > s[imax]) {
			imax = j
		}
	}
	if imax < 0 {
		return c, errors.New("no measured points")
	}
	c.PlateauCounts, c.PlateauPowerUW = s[imax], p[imax]
	// First maximum.
	ifirst := imax
	for j, v := range s {
		if math.IsNaN(v) || v-bg < (s[imax]-bg)/2 {
			continue
		}
		left := j == 0 || math.IsNaN(s[j-1]) || v >= s[j-1]
		right := j == len(s)-1 || math.IsNaN(s[j+1]) || v >= s[j+1]
		if left && right {
			ifirst = j
			break
		}
	}
	c.FirstMaxPowerUW = p[ifirst]
	c.FirstMaxCounts = counts[ifirst]
	if math.IsNaN(c.FirstMaxCounts) {
		c.FirstMaxCounts = s[ifirst]
	}
	// Range around the plateau maximum.
	thr := bg + frac*(s[imax]-bg)
	lo := imax
	for lo > 0 && !math.IsNaN(s[lo-1]) && s[lo-1] >= thr {
		lo--
	}
	hi := imax
	for hi < len(s)-1 && !math.IsNaN(s[hi+1]) && s[hi+1] >= thr {
		hi++
	}
	c.LowUW, c.HighUW = p[lo], p[hi]
	if lo == 0 {
		c.OpenLow = true
	} else if !math.IsNaN(s[lo-1]) {
		c.LowUW = cross(p[lo-1], p[lo], s[lo-1], s[lo], thr)
	}
	if hi == len(s)-1 {
		c.OpenHigh = true
	} else if !math.IsNaN(s[hi+1]) {
		c.HighUW = cross(p[hi], p[hi+1], s[hi], s[hi+1], thr)
	}
	c.RangeUW = c.HighUW - c.LowUW
	c.RangeDecades = math.Log10(c.HighUW / c.LowUW)
	return c, nil
}

// cross interpolates the power where the line through (x0, y0), (x1, y1)
// reaches thr.
func cross(x0, x1, y0, y1, thr float64) float64 {
	if y1 == y0 {
		return (x0 + x1) / 2
	}
	return x0 + (thr-y0)*(x1-x0)/(y1-y0)
}
