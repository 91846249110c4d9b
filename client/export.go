package client

import (
	"bufio"
	"encoding/csv"
	"fmt"
	"io"
	"iter"
	"strconv"
	"time"

	"google.golang.org/protobuf/encoding/protojson"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

// AxisColumn is the CSV column of an axis kind ("gdd_ps2", "power_uw", …).
func AxisColumn(k glissv1.AxisKind) string {
	switch k {
	case glissv1.AxisKind_AXIS_KIND_GDD_PS2:
		return "gdd_ps2"
	case glissv1.AxisKind_AXIS_KIND_STAGE_MM:
		return "stage_mm"
	case glissv1.AxisKind_AXIS_KIND_POWER_UW:
		return "power_uw"
	case glissv1.AxisKind_AXIS_KIND_ANGLE_DEG:
		return "angle_deg"
	case glissv1.AxisKind_AXIS_KIND_DETUNING_MEV:
		return "detuning_mev"
	case glissv1.AxisKind_AXIS_KIND_TEMPERATURE_K:
		return "temperature_k"
	case glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI:
		return "area_pi"
	}
	return "axis"
}

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
// measured_power_uw, counts per channel, gate_ms, started_at, finished_at.
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
	h = append(h, "measured_power_uw")
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
	row = append(row, fmtOpt(p.MeasuredPowerUw))
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
