package store

import (
	"context"
	"fmt"
	"math"
	"path/filepath"
	"sync"
	"testing"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// t0 is an arbitrary fixed start of the test scans.
var t0 = time.Date(2026, 11, 3, 21, 40, 0, 0, time.UTC)

// testScan is a scan record of the demo dot (PHYSICS.md): power × GDD ×
// detuning, counting X and XX photons.
func testScan(id, name string, state glissv1.ScanState, created time.Time) *glissv1.Scan {
	return &glissv1.Scan{
		Id: id,
		Spec: &glissv1.ScanSpec{
			Name: name,
			Axes: []*glissv1.Axis{
				{Kind: glissv1.AxisKind_AXIS_KIND_POWER_UW, Values: &glissv1.Axis_Range{Range: &glissv1.Range{From: 0.05, To: 200, Count: 40}}, Spacing: glissv1.PowerSpacing_POWER_SPACING_AMPLITUDE},
				{Kind: glissv1.AxisKind_AXIS_KIND_GDD_PS2, Values: &glissv1.Axis_Range{Range: &glissv1.Range{From: -26, To: 26, Count: 53}}},
				{Kind: glissv1.AxisKind_AXIS_KIND_DETUNING_MEV, Values: &glissv1.Axis_List{List: &glissv1.ValueList{Values: []float64{-0.2, 0, 0.2}}}},
			},
			Snake:    true,
			GateMs:   100,
			SettleMs: 20,
			Notes:    "demo dot, 4.2 K",
		},
		State:     state,
		Preview:   &glissv1.Preview{Points: 40 * 53 * 3, EstimatedDurationS: 1000, StageTravelMm: 1200, RotationDeg: 90, AxisCounts: []uint32{40, 53, 3}},
		CreatedAt: timestamppb.New(created),
		Bench:     "sim",
		Channels:  []string{"x", "xx"},
		SimSeed:   7,
	}
}

// testPoint is point seq of a scan on the demo bench: 3 axes (power, GDD,
// detuning), 2 channels, timestamps and commanded values. It depends only on
// (id, seq), so a reader can tell whether a stored point is unchanged.
func testPoint(id string, seq uint64) *glissv1.Point {
	const nGDD, nDet = 53, 3
	ip := uint32(seq / (nGDD * nDet) % 40) // repeats past one map: keeps the power ≤ 200 µW
	ig := uint32(seq / nDet % nGDD)
	id3 := uint32(seq % nDet)
	powerUW := 0.05 + 4.9*float64(ip)
	gddPS2 := -26 + float64(ig)
	detMeV := -0.2 + 0.2*float64(id3)
	stageMM := 600 + gddPS2/0.04433 // demo stretcher, PHYSICS.md
	start := t0.Add(time.Duration(seq) * 137 * time.Millisecond)
	temp := 4.2 + 0.01*math.Sin(float64(seq))
	meas := powerUW * (1 + 0.002*math.Cos(float64(seq)))
	return &glissv1.Point{
		ScanId: id,
		Seq:    seq,
		Index:  []uint32{ip, ig, id3},
		Values: []float64{powerUW, gddPS2, detMeV},
		Commanded: &glissv1.Commanded{
			StageMm:     proto.Float64(stageMM),
			GddPs2:      proto.Float64(gddPS2),
			AngleDeg:    proto.Float64(math.Asin(math.Sqrt(powerUW/200)) * 180 / math.Pi),
			PowerUw:     proto.Float64(powerUW),
			DetuningMev: proto.Float64(detMeV),
		},
		MeasuredPowerUw: proto.Float64(meas),
		Counts:          []uint64{1000 + seq%977, 800 + seq%613},
		GateMs:          100,
		StartedAt:       timestamppb.New(start),
		FinishedAt:      timestamppb.New(start.Add(120 * time.Millisecond)),
		TemperatureK:    proto.Float64(temp),
	}
}

func openTest(t testing.TB, o Options) (*Store, string) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "gliss.db")
	s, err := Open(path, o)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = s.Close() })
	return s, path
}

// results collects done callbacks.
type results struct {
	mu   sync.Mutex
	errs map[uint64]error
	n    int
	wg   sync.WaitGroup
}

func newResults() *results { return &results{errs: make(map[uint64]error)} }

func (r *results) done(seq uint64) func(*glissv1.Point, error) {
	r.wg.Add(1)
	return func(_ *glissv1.Point, err error) {
		r.mu.Lock()
		defer r.mu.Unlock()
		if _, dup := r.errs[seq]; dup {
			panic(fmt.Sprintf("done of point %d called twice", seq))
		}
		r.errs[seq] = err
		r.n++
		r.wg.Done()
	}
}

func (r *results) get(seq uint64) (error, bool) {
	r.mu.Lock()
	defer r.mu.Unlock()
	err, ok := r.errs[seq]
	return err, ok
}

// appendRange appends points [from, to) of scan id and waits for their callbacks.
func appendRange(t *testing.T, s *Store, id string, from, to uint64) *results {
	t.Helper()
	r := newResults()
	for seq := from; seq < to; seq++ {
		if err := s.AppendPoint(context.Background(), testPoint(id, seq), r.done(seq)); err != nil {
			t.Fatalf("append %d: %v", seq, err)
		}
	}
	r.wg.Wait()
	return r
}

func readAll(t *testing.T, s *Store, id string, from uint64) []*glissv1.Point {
	t.Helper()
	var out []*glissv1.Point
	if err := s.ReadPoints(context.Background(), id, from, func(p *glissv1.Point) error {
		out = append(out, p)
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	return out
}

func quote(s string) string { return fmt.Sprintf("%q", s) }
func itoa(n uint64) string  { return fmt.Sprintf("%d", n) }
