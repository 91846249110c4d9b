package analysis

import (
	"fmt"
	"math"
	"sort"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

// MapFromPoints builds the power × chirp map of one counter channel from a
// scan's points: gddAxis and powerAxis are the positions of the GDD (ps²)
// and power (µW) axes in Point.index/values, channel the position in
// Point.counts. Other axes must be single-valued. The axes are sorted (the
// power axis increasing); points not stored yet are NaN.
func MapFromPoints(points []*glissv1.Point, gddAxis, powerAxis, channel int) (PowerChirpMap, error) {
	if gddAxis == powerAxis || gddAxis < 0 || powerAxis < 0 || channel < 0 {
		return PowerChirpMap{}, fmt.Errorf("map from points: gdd axis %d, power axis %d, channel %d: want two different axes ≥ 0 and a channel ≥ 0", gddAxis, powerAxis, channel)
	}
	gddOf := map[uint32]float64{}
	powOf := map[uint32]float64{}
	type cell struct{ gi, pi uint32 }
	counts := map[cell]float64{}
	for _, p := range points {
		idx, val := p.GetIndex(), p.GetValues()
		if len(idx) != len(val) || len(idx) <= max(gddAxis, powerAxis) || len(p.GetCounts()) <= channel {
			return PowerChirpMap{}, fmt.Errorf("map from points: point %d has %d indices, %d values, %d counts: want more than axis %d and channel %d", p.GetSeq(), len(idx), len(val), len(p.GetCounts()), max(gddAxis, powerAxis), channel)
		}
		for a := range idx {
			if a != gddAxis && a != powerAxis && idx[a] != 0 {
				return PowerChirpMap{}, fmt.Errorf("map from points: point %d: axis %d has index %d: only the GDD and power axes may be swept", p.GetSeq(), a, idx[a])
			}
		}
		gi, pi := idx[gddAxis], idx[powerAxis]
		gddOf[gi], powOf[pi] = val[gddAxis], val[powerAxis]
		k := cell{gi, pi}
		if _, dup := counts[k]; dup {
			return PowerChirpMap{}, fmt.Errorf("map from points: two points at gdd index %d, power index %d", gi, pi)
		}
		counts[k] = float64(p.GetCounts()[channel])
	}
	if len(counts) == 0 {
		return PowerChirpMap{}, fmt.Errorf("map from points: no points")
	}
	sorted := func(m map[uint32]float64) []uint32 {
		ks := make([]uint32, 0, len(m))
		for k := range m {
			ks = append(ks, k)
		}
		sort.Slice(ks, func(a, b int) bool { return m[ks[a]] < m[ks[b]] })
		return ks
	}
	gks, pks := sorted(gddOf), sorted(powOf)
	m := PowerChirpMap{GDDPS2: make([]float64, len(gks)), PowerUW: make([]float64, len(pks)), Counts: make([][]float64, len(gks))}
	for i, g := range gks {
		m.GDDPS2[i] = gddOf[g]
		m.Counts[i] = make([]float64, len(pks))
		for j, pk := range pks {
			c, ok := counts[cell{g, pk}]
			if !ok {
				c = math.NaN()
			}
			m.Counts[i][j] = c
		}
	}
	for j, pk := range pks {
		m.PowerUW[j] = powOf[pk]
	}
	return m, m.Validate()
}
