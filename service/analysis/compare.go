package analysis

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

// PowerChannel is the name Compare gives the power-meter reading when both
// scans have it at every matched point.
const PowerChannel = "measured_power_uw"

// ChannelDeviation is the deviation of one channel between two scans, B − A.
type ChannelDeviation struct {
	Channel string  `json:"channel"`
	RMS     float64 `json:"rms"`
	MaxAbs  float64 `json:"max_abs"`
	// MaxAtIndex is the axis index of the largest |B − A|.
	MaxAtIndex []uint32 `json:"max_at_index"`
	// MeanA and MeanB are the channel's means over the matched points.
	MeanA float64 `json:"mean_a"`
	MeanB float64 `json:"mean_b"`
}

// DiffRow is one matched point.
type DiffRow struct {
	Index  []uint32
	Values []float64 // axis values of A's point
	A, B   []float64 // per channel (Comparison.Channels order)
}

// Comparison is the point-by-point comparison of scans A and B.
type Comparison struct {
	Channels []ChannelDeviation `json:"channels"`
	Matched  int                `json:"matched"`
	// OnlyA and OnlyB count points whose axis index the other scan lacks.
	OnlyA int       `json:"only_a"`
	OnlyB int       `json:"only_b"`
	Rows  []DiffRow `json:"-"`
}

func indexKey(idx []uint32) string {
	var b strings.Builder
	for i, v := range idx {
		if i > 0 {
			b.WriteByte(',')
		}
		b.WriteString(strconv.FormatUint(uint64(v), 10))
	}
	return b.String()
}

// Compare aligns two scans' points by axis index and reports, per counter
// channel (names in channels, the order of Point.counts), the RMS and the
// largest absolute deviation B − A, plus the power-meter reading when both
// scans have it everywhere. Points must have the same number of counts
// and the same gate at a shared index (counts of different gates are not
// comparable); an index may appear once per scan. Rows follow A's order.
func Compare(a, b []*glissv1.Point, channels []string) (Comparison, error) {
	byB := make(map[string]*glissv1.Point, len(b))
	for _, p := range b {
		k := indexKey(p.GetIndex())
		if _, dup := byB[k]; dup {
			return Comparison{}, fmt.Errorf("compare: scan B has two points at index [%s]", k)
		}
		byB[k] = p
	}
	seenA := make(map[string]bool, len(a))
	var pairs [][2]*glissv1.Point
	for _, p := range a {
		k := indexKey(p.GetIndex())
		if seenA[k] {
			return Comparison{}, fmt.Errorf("compare: scan A has two points at index [%s]", k)
		}
		seenA[k] = true
		q, ok := byB[k]
		if !ok {
			continue
		}
		if len(p.GetCounts()) != len(channels) || len(q.GetCounts()) != len(channels) {
			return Comparison{}, fmt.Errorf("compare: index [%s]: %d and %d counts for %d channels: must match", k, len(p.GetCounts()), len(q.GetCounts()), len(channels))
		}
		if p.GetGateMs() != q.GetGateMs() {
			return Comparison{}, fmt.Errorf("compare: index [%s]: gate %g ms in A, %g ms in B: counts of different gates are not comparable", k, p.GetGateMs(), q.GetGateMs())
		}
		pairs = append(pairs, [2]*glissv1.Point{p, q})
	}
	if len(pairs) == 0 {
		return Comparison{}, errors.New("compare: the scans share no axis index")
	}
	names := append([]string(nil), channels...)
	withPower := true
	for _, pq := range pairs {
		if pq[0].MeasuredPowerUw == nil || pq[1].MeasuredPowerUw == nil {
			withPower = false
			break
		}
	}
	if withPower {
		names = append(names, PowerChannel)
	}
	c := Comparison{Matched: len(pairs), OnlyA: len(a) - len(pairs), OnlyB: len(b) - len(pairs)}
	c.Channels = make([]ChannelDeviation, len(names))
	for ch := range names {
		c.Channels[ch].Channel = names[ch]
	}
	c.Rows = make([]DiffRow, len(pairs))
	for r, pq := range pairs {
		row := DiffRow{Index: pq[0].GetIndex(), Values: pq[0].GetValues(), A: make([]float64, len(names)), B: make([]float64, len(names))}
		for ch := range channels {
			row.A[ch], row.B[ch] = float64(pq[0].Counts[ch]), float64(pq[1].Counts[ch])
		}
		if withPower {
			row.A[len(channels)], row.B[len(channels)] = pq[0].GetMeasuredPowerUw(), pq[1].GetMeasuredPowerUw()
		}
		for ch := range names {
			d := row.B[ch] - row.A[ch]
			cd := &c.Channels[ch]
			cd.RMS += d * d
			cd.MeanA += row.A[ch]
			cd.MeanB += row.B[ch]
			if math.Abs(d) > cd.MaxAbs || cd.MaxAtIndex == nil {
				cd.MaxAbs, cd.MaxAtIndex = math.Abs(d), row.Index
			}
		}
		c.Rows[r] = row
	}
	n := float64(len(pairs))
	for ch := range c.Channels {
		cd := &c.Channels[ch]
		cd.RMS = math.Sqrt(cd.RMS / n)
		cd.MeanA /= n
		cd.MeanB /= n
	}
	return c, nil
}

// WriteCSV writes the difference table: one row per matched point with the
// axis indices (index_0 …), the axis values (named by axisNames, e.g.
// "gdd_ps2", or value_0 … when nil), and per channel its value in A, in B
// and B − A ("xx_a", "xx_b", "xx_diff").
func (c Comparison) WriteCSV(w io.Writer, axisNames []string) error {
	if len(c.Rows) == 0 {
		return errors.New("compare: no rows to write")
	}
	nIdx, nVal := len(c.Rows[0].Index), len(c.Rows[0].Values)
	if axisNames != nil && len(axisNames) != nVal {
		return fmt.Errorf("compare: %d axis names for %d axis values", len(axisNames), nVal)
	}
	cw := csv.NewWriter(w)
	head := make([]string, 0, nIdx+nVal+3*len(c.Channels))
	for i := 0; i < nIdx; i++ {
		head = append(head, fmt.Sprintf("index_%d", i))
	}
	for i := 0; i < nVal; i++ {
		if axisNames != nil {
			head = append(head, axisNames[i])
		} else {
			head = append(head, fmt.Sprintf("value_%d", i))
		}
	}
	for _, ch := range c.Channels {
		head = append(head, ch.Channel+"_a", ch.Channel+"_b", ch.Channel+"_diff")
	}
	if err := cw.Write(head); err != nil {
		return fmt.Errorf("compare: write csv: %w", err)
	}
	rec := make([]string, len(head))
	f := func(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
	for _, r := range c.Rows {
		if len(r.Index) != nIdx || len(r.Values) != nVal {
			return fmt.Errorf("compare: row at index [%s] has %d indices and %d values, want %d and %d", indexKey(r.Index), len(r.Index), len(r.Values), nIdx, nVal)
		}
		rec = rec[:0]
		for _, v := range r.Index {
			rec = append(rec, strconv.FormatUint(uint64(v), 10))
		}
		for _, v := range r.Values {
			rec = append(rec, f(v))
		}
		for ch := range c.Channels {
			rec = append(rec, f(r.A[ch]), f(r.B[ch]), f(r.B[ch]-r.A[ch]))
		}
		if err := cw.Write(rec); err != nil {
			return fmt.Errorf("compare: write csv: %w", err)
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("compare: write csv: %w", err)
	}
	return nil
}
