package daemon_test

import (
	"bytes"
	"context"
	"encoding/csv"
	"math"
	"strings"
	"sync"
	"testing"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/service/daemon"
	"github.com/gliss-lab/gliss/sim/detection"
	"github.com/gliss-lab/gliss/sim/model"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// startDaemon runs glissd in process on a real loopback TCP listener.
func startDaemon(t *testing.T, cfg daemon.Config) (*daemon.Daemon, *client.Client) {
	t.Helper()
	if cfg.DataDir == "" {
		cfg.DataDir = t.TempDir()
	}
	if cfg.Listen == "" {
		cfg.Listen = "127.0.0.1:0"
	}
	if cfg.SimSpeed == 0 && !cfg.SimInstant {
		cfg.SimSpeed = 1000
	}
	ctx := context.Background()
	d, err := daemon.Start(ctx, cfg)
	if err != nil {
		t.Fatalf("start daemon: %v", err)
	}
	c, err := client.Dial(ctx, d.Addr())
	if err != nil {
		d.Stop(ctx)
		t.Fatalf("dial: %v", err)
	}
	t.Cleanup(func() {
		c.Close()
		sctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		if err := d.Stop(sctx); err != nil {
			t.Errorf("stop daemon: %v", err)
		}
	})
	return d, c
}

type watched struct {
	points []*glissv1.Point
	states []glissv1.ScanState
	final  *glissv1.Scan
}

func watch(t *testing.T, ctx context.Context, c *client.Client, id string, from uint64) watched {
	t.Helper()
	var w watched
	for ev, err := range c.Watch(ctx, id, from) {
		if err != nil {
			t.Errorf("watch %s: %v", id, err)
			return w
		}
		switch e := ev.Event.(type) {
		case *glissv1.ScanEvent_Point:
			w.points = append(w.points, e.Point)
		case *glissv1.ScanEvent_Scan:
			w.final = e.Scan
			if n := len(w.states); n == 0 || w.states[n-1] != e.Scan.State {
				w.states = append(w.states, e.Scan.State)
			}
		}
	}
	return w
}

// TestMapEndToEnd: a 2-axis map on the simulated bench over TCP loopback.
func TestMapEndToEnd(t *testing.T) {
	_, c := startDaemon(t, daemon.Config{SimSeed: 7})
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()

	gdd := []float64{0, 20}
	// µW: areas π, 3.55π (the first maximum of the zero-chirp XX Rabi curve),
	// 8π and 10π (on the adiabatic plateau at 20 ps²) for the demo coupling Θ = π·sqrt(P/1 µW).
	power := []float64{1, 12.6, 64, 100}
	spec := client.MapSpec(client.List(gdd...), client.List(power...), client.Options{Name: "e2e map", GateMS: 1000, Snake: true})
	sc, err := c.Submit(ctx, spec)
	if err != nil {
		t.Fatalf("submit: %v", err)
	}
	if sc.State != glissv1.ScanState_SCAN_STATE_QUEUED || sc.Preview.GetPoints() != 8 {
		t.Fatalf("submitted scan: state %v, preview %v", sc.State, sc.Preview)
	}
	w := watch(t, ctx, c, sc.Id, 0)

	// State sequence as seen by the watcher and as recorded.
	if w.final.GetState() != glissv1.ScanState_SCAN_STATE_SUCCEEDED {
		t.Fatalf("final state %v (%s)", w.final.GetState(), w.final.GetReason())
	}
	var rec []glissv1.ScanState
	for _, tr := range w.final.Transitions {
		rec = append(rec, tr.To)
	}
	want := []glissv1.ScanState{glissv1.ScanState_SCAN_STATE_QUEUED, glissv1.ScanState_SCAN_STATE_RUNNING, glissv1.ScanState_SCAN_STATE_SUCCEEDED}
	if !equalStates(rec, want) {
		t.Errorf("recorded transitions %v, want %v", rec, want)
	}
	if len(w.points) != 8 {
		t.Fatalf("watcher got %d points, want 8", len(w.points))
	}
	// Snake order: row 0 forward, row 1 backward on the fast (power) axis.
	wantIdx := [][2]uint32{{0, 0}, {0, 1}, {0, 2}, {0, 3}, {1, 3}, {1, 2}, {1, 1}, {1, 0}}
	for i, p := range w.points {
		if p.Seq != uint64(i) || p.Index[0] != wantIdx[i][0] || p.Index[1] != wantIdx[i][1] {
			t.Errorf("point %d: seq %d index %v, want index %v", i, p.Seq, p.Index, wantIdx[i])
		}
		if p.Values[0] != gdd[p.Index[0]] || p.Values[1] != power[p.Index[1]] {
			t.Errorf("point %d: values %v", i, p.Values)
		}
		if p.Commanded.GetStageMm() == 0 || p.Commanded.AngleDeg == nil || p.MeasuredPowerUw == nil || len(p.Counts) != 2 || p.GateMs != 1000 {
			t.Errorf("point %d incomplete: %v", i, p)
		}
	}

	// XX counts against the physics core's yields × the detection chain, at
	// points where power noise does not matter to first order: the first
	// maximum of the zero-chirp Rabi curve and the chirped plateau at 8π and
	// 10π. The simulated dot has the demo phonons at the cryostat's 4.2 K.
	chain := detection.Demo()
	bath := phonon.DemoBath()
	for _, p := range w.points {
		g, pw := p.Values[0], p.Values[1]
		if !(g == 0 && pw == 12.6) && !(g == 20 && pw >= 64) {
			continue
		}
		if p.TemperatureK == nil || math.Abs(*p.TemperatureK-4.2) > 0.1 {
			t.Errorf("point %d: temperature %v, want 4.2 K", p.Seq, p.TemperatureK)
		}
		mp := model.DemoParams()
		mp.GDDPS2, mp.AreaPi = g, math.Sqrt(pw/1.0)
		res, err := phonon.Solve(mp, &bath)
		if err != nil {
			t.Fatal(err)
		}
		rates := chain.RatesHz([]float64{res.NX, res.NXX})
		mean := rates[1] * p.GateMs / 1000
		got := float64(p.Counts[1])
		// Poisson σ = √mean; 5σ plus 0.5 % for residual power-noise and stage-noise effects.
		if tol := 5*math.Sqrt(mean) + 0.005*mean; math.Abs(got-mean) > tol {
			t.Errorf("GDD %g ps², P %g µW: XX counts %v, model × chain %.1f ± %.1f", g, pw, got, mean, tol)
		}
	}

	// Export: the CSV columns.
	var buf bytes.Buffer
	n, err := client.WriteCSV(&buf, w.final, c.Points(ctx, sc.Id, 0))
	if err != nil || n != 8 {
		t.Fatalf("export: %d points, %v", n, err)
	}
	rows, err := csv.NewReader(&buf).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	header := strings.Join(rows[0], ",")
	for _, col := range []string{"seq", "gdd_ps2", "power_uw", "stage_mm", "angle_deg", "measured_power_uw", "counts_x", "counts_xx", "gate_ms", "started_at"} {
		if !strings.Contains(","+header+",", ","+col+",") {
			t.Errorf("CSV header %q lacks %q", header, col)
		}
	}
	if len(rows) != 9 {
		t.Errorf("CSV has %d rows, want 9", len(rows))
	}
}

func equalStates(a, b []glissv1.ScanState) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// TestTwoWatchers: one watcher from the start, one joining late from
// sequence 0; both receive every point exactly once, in order.
func TestTwoWatchers(t *testing.T) {
	_, c := startDaemon(t, daemon.Config{SimSpeed: 200})
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	spec := client.PowerSpec(client.Range(0.1, 50, 40), client.Options{GateMS: 20, Fixed: []*glissv1.Setpoint{client.Fixed(glissv1.AxisKind_AXIS_KIND_GDD_PS2, 10)}})
	sc, err := c.Submit(ctx, spec)
	if err != nil {
		t.Fatal(err)
	}
	var wg sync.WaitGroup
	var early, late watched
	wg.Add(2)
	go func() { defer wg.Done(); early = watch(t, ctx, c, sc.Id, 0) }()
	go func() {
		defer wg.Done()
		// Join once some points are stored.
		for {
			s, err := c.Get(ctx, sc.Id)
			if err != nil || s.PointsStored >= 10 || client.IsTerminal(s.State) {
				break
			}
			time.Sleep(5 * time.Millisecond)
		}
		late = watch(t, ctx, c, sc.Id, 0)
	}()
	wg.Wait()
	for name, w := range map[string]watched{"early": early, "late": late} {
		if len(w.points) != 40 {
			t.Errorf("%s watcher: %d points, want 40", name, len(w.points))
		}
		for i, p := range w.points {
			if p.Seq != uint64(i) {
				t.Errorf("%s watcher: point %d has seq %d", name, i, p.Seq)
				break
			}
		}
		if w.final.GetState() != glissv1.ScanState_SCAN_STATE_SUCCEEDED {
			t.Errorf("%s watcher: final state %v", name, w.final.GetState())
		}
	}
}
