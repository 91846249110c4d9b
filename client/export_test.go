package client

import (
	"errors"
	"math"
	"testing"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

func points(ps ...*glissv1.Point) func(func(*glissv1.Point, error) bool) {
	return func(yield func(*glissv1.Point, error) bool) {
		for _, p := range ps {
			if !yield(p, nil) {
				return
			}
		}
	}
}

func TestAxisValuesAmplitude(t *testing.T) {
	a := Axis(glissv1.AxisKind_AXIS_KIND_POWER_UW, Range(1, 16, 4))
	a.Spacing = glissv1.PowerSpacing_POWER_SPACING_AMPLITUDE
	// Linear in √P from 1 to 4: √P = 1, 2, 3, 4, P = 1, 4, 9, 16.
	for i, want := range []float64{1, 4, 9, 16} {
		if got := AxisValues(a)[i]; math.Abs(got-want) > 1e-12 {
			t.Errorf("value %d: %v, want %v", i, got, want)
		}
	}
	if v := AxisValues(Axis(glissv1.AxisKind_AXIS_KIND_GDD_PS2, Range(-20, 20, 5))); v[1] != -10 || v[4] != 20 {
		t.Errorf("linear range: %v", v)
	}
	if v := AxisValues(Axis(glissv1.AxisKind_AXIS_KIND_GDD_PS2, List(3, 1))); len(v) != 2 || v[0] != 3 {
		t.Errorf("list: %v", v)
	}
}

func TestNewGrid(t *testing.T) {
	sc := &glissv1.Scan{Id: "s", Channels: []string{"x", "xx"}, Spec: MapSpec(List(0, 20), List(1, 4, 9), Options{})}
	mp := 3.5
	g, err := NewGrid(sc, points(
		&glissv1.Point{Seq: 0, Index: []uint32{0, 0}, Values: []float64{0, 1}, Counts: []uint64{10, 20}, MeasuredPowerUw: &mp},
		&glissv1.Point{Seq: 1, Index: []uint32{1, 2}, Values: []float64{20, 9.5}, Counts: []uint64{11, 21}},
	))
	if err != nil {
		t.Fatal(err)
	}
	if g.Stored != 2 || g.Shape[0] != 2 || g.Shape[1] != 3 {
		t.Fatalf("grid %+v", g)
	}
	// C order: (1, 2) is element 1*3+2 = 5.
	if g.Counts[1][0] != 20 || g.Counts[1][5] != 21 || g.Counts[0][5] != 11 {
		t.Errorf("counts %v", g.Counts)
	}
	for _, i := range []int{1, 2, 3, 4} {
		if !math.IsNaN(g.Counts[0][i]) {
			t.Errorf("element %d of a point not stored: %v, want NaN", i, g.Counts[0][i])
		}
	}
	// A stored point's value replaces the planned one.
	if g.AxisValues[1][2] != 9.5 {
		t.Errorf("axis value from the point: %v", g.AxisValues[1])
	}
	if g.MeasuredPowerUW[0] != 3.5 || !math.IsNaN(g.MeasuredPowerUW[5]) {
		t.Errorf("measured power %v", g.MeasuredPowerUW)
	}
	if _, err := NewGrid(sc, points(&glissv1.Point{Index: []uint32{2, 0}})); err == nil {
		t.Error("index outside the axis accepted")
	}
	if _, err := NewGrid(sc, points(&glissv1.Point{Index: []uint32{0}})); err == nil {
		t.Error("point with one index in a two-axis scan accepted")
	}
	bad := func(yield func(*glissv1.Point, error) bool) { yield(nil, errors.New("stream broke")) }
	if _, err := NewGrid(sc, bad); err == nil {
		t.Error("stream error swallowed")
	}
	if arrayName("ch-1 a") != "ch_1_a" {
		t.Error(arrayName("ch-1 a"))
	}
}
