package client

import (
	"bufio"
	"encoding/csv"
	"fmt"
	"io"
	"iter"
	"math"
	"strconv"
	"time"

	"google.golang.org/protobuf/encoding/protojson"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client/npy"
	"github.com/gliss-lab/gliss/service/sweep"
)

// AxisColumn is the CSV column of an axis kind ("gdd_ps2", "power_uw", …).
func AxisColumn(k glissv1.AxisKind) string { return sweep.Column(k) }

// commanded columns, in CSV order, with their getters.
var commandedColumns = []struct {
	name string
	get  func(*glissv1.Commanded) *float64
}{
	{"gdd_ps2", func(c *glissv1.Commanded) *float64 { return c.GddPs2 }},
	{"stage_mm", func(c *glissv1.Commanded) *float64 { return c.StageMm }},
	{"power_uw", func(c *glissv1.Commanded) *float64 { return c.PowerUw }},
	{"angle_deg", func(c *glissv1.Commanded) *float64 { return c.AngleDeg }},
	{"detuning_mev", func(c *glissv1.Commanded) *float64 { return c.DetuningMev }},
	{"temperature_k", func(c *glissv1.Commanded) *float64 { return c.TemperatureK }},
}

// commandedUsed lists the commanded quantities a scan sets: those of its
// axes and fixed settings, in physical and raw units (a GDD axis also
// commands stage_mm, a power axis angle_deg, and the reverse).
func commandedUsed(sc *glissv1.Scan) map[string]bool {
	used := map[string]bool{}
	mark := func(k glissv1.AxisKind) {
		switch k {
		case glissv1.AxisKind_AXIS_KIND_GDD_PS2, glissv1.AxisKind_AXIS_KIND_STAGE_MM:
			used["gdd_ps2"], used["stage_mm"] = true, true
		case glissv1.AxisKind_AXIS_KIND_POWER_UW, glissv1.AxisKind_AXIS_KIND_ANGLE_DEG, glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI:
			used["power_uw"], used["angle_deg"] = true, true
		case glissv1.AxisKind_AXIS_KIND_DETUNING_MEV:
			used["detuning_mev"] = true
		case glissv1.AxisKind_AXIS_KIND_TEMPERATURE_K:
			used["temperature_k"] = true
		}
	}
	for _, a := range sc.GetSpec().GetAxes() {
		mark(a.GetKind())
	}
	for _, f := range sc.GetSpec().GetFixed() {
		mark(f.GetKind())
	}
	return used
}

// CSVHeader is the header of a scan's CSV export: seq, one column per axis
// in its unit, the other commanded quantities (physical and raw units),
// measured_power_uw, measured_temperature_k (empty without a thermometer),
// counts per channel, gate_ms, started_at, finished_at.
func CSVHeader(sc *glissv1.Scan) []string {
	h := []string{"seq"}
	have := map[string]bool{}
	for _, a := range sc.GetSpec().GetAxes() {
		c := AxisColumn(a.GetKind())
		h = append(h, c)
		have[c] = true
	}
	used := commandedUsed(sc)
	for _, c := range commandedColumns {
		if !have[c.name] && used[c.name] {
			h = append(h, c.name)
		}
	}
	h = append(h, "measured_power_uw", "measured_temperature_k")
	for _, ch := range sc.GetChannels() {
		h = append(h, "counts_"+ch)
	}
	return append(h, "gate_ms", "started_at", "finished_at")
}

func fmtFloat(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

func fmtOpt(v *float64) string {
	if v == nil {
		return ""
	}
	return fmtFloat(*v)
}

func fmtTime(t interface{ AsTime() time.Time }, valid bool) string {
	if !valid {
		return ""
	}
	return t.AsTime().UTC().Format(time.RFC3339Nano)
}

// CSVRow formats one point for CSVHeader(sc).
func CSVRow(sc *glissv1.Scan, p *glissv1.Point) []string {
	row := []string{strconv.FormatUint(p.GetSeq(), 10)}
	have := map[string]bool{}
	for i, a := range sc.GetSpec().GetAxes() {
		v := ""
		if i < len(p.GetValues()) {
			v = fmtFloat(p.GetValues()[i])
		}
		row = append(row, v)
		have[AxisColumn(a.GetKind())] = true
	}
	cmd := p.GetCommanded()
	if cmd == nil {
		cmd = &glissv1.Commanded{}
	}
	used := commandedUsed(sc)
	for _, c := range commandedColumns {
		if !have[c.name] && used[c.name] {
			row = append(row, fmtOpt(c.get(cmd)))
		}
	}
	row = append(row, fmtOpt(p.MeasuredPowerUw), fmtOpt(p.TemperatureK))
	for i := range sc.GetChannels() {
		v := ""
		if i < len(p.GetCounts()) {
			v = strconv.FormatUint(p.GetCounts()[i], 10)
		}
		row = append(row, v)
	}
	return append(row, fmtFloat(p.GetGateMs()), fmtTime(p.GetStartedAt(), p.GetStartedAt() != nil), fmtTime(p.GetFinishedAt(), p.GetFinishedAt() != nil))
}

// WriteCSV writes a scan's points as CSV, streaming: nothing is held but
// the current point. It returns the number of points written.
func WriteCSV(w io.Writer, sc *glissv1.Scan, points iter.Seq2[*glissv1.Point, error]) (uint64, error) {
	cw := csv.NewWriter(w)
	if err := cw.Write(CSVHeader(sc)); err != nil {
		return 0, err
	}
	var n uint64
	for p, err := range points {
		if err != nil {
			cw.Flush()
			return n, fmt.Errorf("read point %d: %w", n, err)
		}
		if err := cw.Write(CSVRow(sc, p)); err != nil {
			return n, err
		}
		n++
	}
	cw.Flush()
	return n, cw.Error()
}

// WriteJSONL writes one protobuf-JSON object per line: the scan record
// first ({"scan": …}), then each point ({"point": …}).
func WriteJSONL(w io.Writer, sc *glissv1.Scan, points iter.Seq2[*glissv1.Point, error]) (uint64, error) {
	bw := bufio.NewWriter(w)
	mo := protojson.MarshalOptions{}
	line := func(kind string, b []byte) error {
		if _, err := fmt.Fprintf(bw, "{%q:%s}\n", kind, b); err != nil {
			return err
		}
		return nil
	}
	b, err := mo.Marshal(sc)
	if err != nil {
		return 0, err
	}
	if err := line("scan", b); err != nil {
		return 0, err
	}
	var n uint64
	for p, err := range points {
		if err != nil {
			bw.Flush()
			return n, fmt.Errorf("read point %d: %w", n, err)
		}
		b, err := mo.Marshal(p)
		if err != nil {
			return n, err
		}
		if err := line("point", b); err != nil {
			return n, err
		}
		n++
	}
	return n, bw.Flush()
}

// Grid is a scan's points arranged on its axes: what plots and NumPy
// exports need.
type Grid struct {
	// Axes are the axis columns ("gdd_ps2", "power_uw", …), slowest first.
	Axes []string
	// AxisValues are each axis's values in its unit, slowest first.
	AxisValues [][]float64
	// Shape is the number of values of each axis, slowest first.
	Shape []int
	// Channels are the counter channel names, in the order of Counts.
	Channels []string
	// Counts holds one array per channel, in C order over Shape
	// (index = Σ index[k]·stride[k]); NaN where no point is stored.
	Counts [][]float64
	// MeasuredPowerUW is the power meter reading per point, NaN where no
	// point is stored or the bench has no power meter; nil if no point has one.
	MeasuredPowerUW []float64
	// Stored is the number of points read.
	Stored uint64
}

// AxisValues returns the values of a spec's axis as the daemon plans them:
// a list as given, a range linear in the value or, for a power axis with
// amplitude spacing, linear in √P with the end points exact.
func AxisValues(a *glissv1.Axis) []float64 {
	if r := a.GetRange(); r != nil {
		n := int(r.GetCount())
		if n < 1 {
			return nil
		}
		amp := a.GetKind() == glissv1.AxisKind_AXIS_KIND_POWER_UW && a.GetSpacing() == glissv1.PowerSpacing_POWER_SPACING_AMPLITUDE
		from, to := r.GetFrom(), r.GetTo()
		if amp {
			from, to = math.Sqrt(from), math.Sqrt(to)
		}
		out := make([]float64, n)
		for i := range out {
			x := from
			if n > 1 {
				x = from + (to-from)*float64(i)/float64(n-1)
			}
			if amp {
				x *= x
			}
			out[i] = x
		}
		out[0] = r.GetFrom()
		if n > 1 {
			out[n-1] = r.GetTo()
		}
		return out
	}
	return append([]float64(nil), a.GetList().GetValues()...)
}

// maxGridPoints bounds the grid built from a scan record (10^8 points, 800 MB per channel).
const maxGridPoints = 100_000_000

// NewGrid reads a scan's points onto the grid of its axes. The axis values
// come from the spec and are replaced by the values the stored points
// carry (which are what the daemon commanded).
func NewGrid(sc *glissv1.Scan, points iter.Seq2[*glissv1.Point, error]) (*Grid, error) {
	axes := sc.GetSpec().GetAxes()
	if len(axes) == 0 {
		return nil, fmt.Errorf("scan %s has no axes", sc.GetId())
	}
	g := &Grid{Channels: append([]string(nil), sc.GetChannels()...)}
	total := 1
	for _, a := range axes {
		v := AxisValues(a)
		if len(v) == 0 {
			return nil, fmt.Errorf("scan %s: axis %s has no values", sc.GetId(), AxisColumn(a.GetKind()))
		}
		g.Axes = append(g.Axes, AxisColumn(a.GetKind()))
		g.AxisValues = append(g.AxisValues, v)
		g.Shape = append(g.Shape, len(v))
		if total > maxGridPoints/len(v) {
			return nil, fmt.Errorf("scan %s: more than %d grid points", sc.GetId(), maxGridPoints)
		}
		total *= len(v)
	}
	nan := func() []float64 {
		s := make([]float64, total)
		for i := range s {
			s[i] = math.NaN()
		}
		return s
	}
	for range g.Channels {
		g.Counts = append(g.Counts, nan())
	}
	for p, err := range points {
		if err != nil {
			return nil, fmt.Errorf("read point %d: %w", g.Stored, err)
		}
		idx := p.GetIndex()
		if len(idx) != len(g.Shape) {
			return nil, fmt.Errorf("point %d has %d indices, the scan %d axes", p.GetSeq(), len(idx), len(g.Shape))
		}
		flat := 0
		for k, i := range idx {
			if int(i) >= g.Shape[k] {
				return nil, fmt.Errorf("point %d: index %d of axis %s outside 0 … %d", p.GetSeq(), i, g.Axes[k], g.Shape[k]-1)
			}
			flat = flat*g.Shape[k] + int(i)
			if k < len(p.GetValues()) {
				g.AxisValues[k][i] = p.GetValues()[k]
			}
		}
		for c := range g.Counts {
			if c < len(p.GetCounts()) {
				g.Counts[c][flat] = float64(p.GetCounts()[c])
			}
		}
		if p.MeasuredPowerUw != nil {
			if g.MeasuredPowerUW == nil {
				g.MeasuredPowerUW = nan()
			}
			g.MeasuredPowerUW[flat] = p.GetMeasuredPowerUw()
		}
		g.Stored++
	}
	return g, nil
}

// Channel returns the index of a channel by name, or -1.
func (g *Grid) Channel(name string) int {
	for i, c := range g.Channels {
		if c == name {
			return i
		}
	}
	return -1
}

// WriteNPY writes a scan as NumPy arrays into sink: one array per axis
// (e.g. gdd_ps2, power_uw: float64 vectors), one float64 array per
// channel (counts_x, counts_xx) shaped by the axes, slowest first, with
// NaN where no point is stored, and measured_power_uw likewise when the
// bench has a power meter. It returns the number of points read.
func WriteNPY(sink npy.Sink, sc *glissv1.Scan, points iter.Seq2[*glissv1.Point, error]) (uint64, error) {
	g, err := NewGrid(sc, points)
	if err != nil {
		return 0, err
	}
	put := func(name string, shape []int, data []float64) error {
		w, err := sink.Create(name)
		if err != nil {
			return err
		}
		if err := npy.WriteFloat64(w, shape, data); err != nil {
			return fmt.Errorf("array %s: %w", name, err)
		}
		return nil
	}
	for k, name := range g.Axes {
		if err := put(name, []int{g.Shape[k]}, g.AxisValues[k]); err != nil {
			return g.Stored, err
		}
	}
	for c, ch := range g.Channels {
		if err := put("counts_"+arrayName(ch), g.Shape, g.Counts[c]); err != nil {
			return g.Stored, err
		}
	}
	if g.MeasuredPowerUW != nil {
		if err := put("measured_power_uw", g.Shape, g.MeasuredPowerUW); err != nil {
			return g.Stored, err
		}
	}
	return g.Stored, sink.Close()
}

// arrayName makes a channel name a Python identifier (letters, digits, _).
func arrayName(s string) string {
	b := []byte(s)
	for i, c := range b {
		if !(c == '_' || c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9') {
			b[i] = '_'
		}
	}
	return string(b)
}
