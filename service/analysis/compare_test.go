package analysis

import (
	"bytes"
	"encoding/csv"
	"math"
	"strings"
	"testing"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

func pt(i, j uint32, gdd, p float64, x, xx uint64, power *float64) *glissv1.Point {
	return &glissv1.Point{Index: []uint32{i, j}, Values: []float64{gdd, p}, Counts: []uint64{x, xx}, GateMs: 50, MeasuredPowerUw: power}
}

func f64(v float64) *float64 { return &v }

func TestCompare(t *testing.T) {
	a := []*glissv1.Point{
		pt(0, 0, -10, 1, 100, 50, f64(1.0)),
		pt(0, 1, -10, 2, 200, 80, f64(2.0)),
		pt(1, 0, 10, 1, 110, 40, f64(1.1)),
		pt(1, 1, 10, 2, 210, 90, f64(2.0)),
	}
	// B in another order, one point missing, one extra.
	b := []*glissv1.Point{
		pt(1, 1, 10, 2, 214, 87, f64(2.0)),
		pt(0, 0, -10, 1, 103, 50, f64(1.0)),
		pt(1, 0, 10, 1, 110, 44, f64(1.0)),
		pt(2, 0, 30, 1, 1, 1, f64(1.0)),
	}
	c, err := Compare(a, b, []string{"x", "xx"})
	if err != nil {
		t.Fatal(err)
	}
	if c.Matched != 3 || c.OnlyA != 1 || c.OnlyB != 1 {
		t.Errorf("matched %d, only A %d, only B %d; want 3, 1, 1", c.Matched, c.OnlyA, c.OnlyB)
	}
	if len(c.Channels) != 3 || c.Channels[2].Channel != PowerChannel {
		t.Fatalf("channels %+v, want x, xx, %s", c.Channels, PowerChannel)
	}
	// x: B − A = 3, 0, 4 → RMS sqrt(25/3), max 4 at [1 1].
	x := c.Channels[0]
	if math.Abs(x.RMS-math.Sqrt(25.0/3)) > 1e-12 || x.MaxAbs != 4 || x.MaxAtIndex[0] != 1 || x.MaxAtIndex[1] != 1 {
		t.Errorf("x: %+v", x)
	}
	// xx: 0, 4, −3 → RMS sqrt(25/3), max 4 at [1 0].
	xx := c.Channels[1]
	if math.Abs(xx.RMS-math.Sqrt(25.0/3)) > 1e-12 || xx.MaxAbs != 4 || xx.MaxAtIndex[0] != 1 || xx.MaxAtIndex[1] != 0 {
		t.Errorf("xx: %+v", xx)
	}
	if math.Abs(c.Channels[2].MaxAbs-0.1) > 1e-12 {
		t.Errorf("power: %+v", c.Channels[2])
	}
	var buf bytes.Buffer
	if err := c.WriteCSV(&buf, []string{"gdd_ps2", "power_uw"}); err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(strings.NewReader(buf.String())).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	head := strings.Join(recs[0], ",")
	if head != "index_0,index_1,gdd_ps2,power_uw,x_a,x_b,x_diff,xx_a,xx_b,xx_diff,measured_power_uw_a,measured_power_uw_b,measured_power_uw_diff" {
		t.Errorf("header %s", head)
	}
	if len(recs) != 4 || strings.Join(recs[1], ",") != "0,0,-10,1,100,103,3,50,50,0,1,1,0" {
		t.Errorf("csv:\n%s", buf.String())
	}
}

func TestCompareErrors(t *testing.T) {
	a := []*glissv1.Point{pt(0, 0, 0, 1, 1, 1, nil)}
	if _, err := Compare(a, []*glissv1.Point{pt(5, 5, 0, 1, 1, 1, nil)}, []string{"x", "xx"}); err == nil {
		t.Error("no shared index: want an error")
	}
	if _, err := Compare(append(a, pt(0, 0, 0, 1, 1, 1, nil)), a, []string{"x", "xx"}); err == nil {
		t.Error("duplicate index: want an error")
	}
	q := pt(0, 0, 0, 1, 1, 1, nil)
	q.GateMs = 100
	if _, err := Compare(a, []*glissv1.Point{q}, []string{"x", "xx"}); err == nil {
		t.Error("different gates: want an error")
	}
	if _, err := Compare(a, a, []string{"x"}); err == nil {
		t.Error("channel count mismatch: want an error")
	}
	// Without a power reading on every point, no power channel.
	c, err := Compare(a, a, []string{"x", "xx"})
	if err != nil || len(c.Channels) != 2 || c.Channels[0].RMS != 0 {
		t.Errorf("self comparison: %+v, %v", c, err)
	}
}

func TestMapFromPoints(t *testing.T) {
	// Axes [power, gdd] with the power axis descending; one point missing.
	pts := []*glissv1.Point{
		{Index: []uint32{0, 0}, Values: []float64{4, -5}, Counts: []uint64{1, 40}},
		{Index: []uint32{0, 1}, Values: []float64{4, 5}, Counts: []uint64{1, 41}},
		{Index: []uint32{1, 0}, Values: []float64{2, -5}, Counts: []uint64{1, 20}},
		{Index: []uint32{1, 1}, Values: []float64{2, 5}, Counts: []uint64{1, 21}},
		{Index: []uint32{2, 0}, Values: []float64{1, -5}, Counts: []uint64{1, 10}},
	}
	m, err := MapFromPoints(pts, 1, 0, 1)
	if err != nil {
		t.Fatal(err)
	}
	if m.GDDPS2[0] != -5 || m.GDDPS2[1] != 5 || m.PowerUW[0] != 1 || m.PowerUW[2] != 4 {
		t.Errorf("axes %v %v", m.GDDPS2, m.PowerUW)
	}
	if m.Counts[0][0] != 10 || m.Counts[0][2] != 40 || !math.IsNaN(m.Counts[1][0]) || m.Counts[1][2] != 41 {
		t.Errorf("counts %v", m.Counts)
	}
	if _, err := MapFromPoints(pts, 1, 1, 1); err == nil {
		t.Error("same axis twice: want an error")
	}
}
