package daemon_test

import (
	"context"
	"strings"
	"testing"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/service/daemon"
	simbench "github.com/gliss-lab/gliss/sim/bench"
)

func fastSimBench(t *testing.T, speed float64) *drivers.Bench {
	t.Helper()
	b, err := simbench.New(simbench.Options{Seed: 7, Speed: speed})
	if err != nil {
		t.Fatal(err)
	}
	b.TimeScale = speed
	return b
}

// An instrument that stops answering past its retry budget pauses the scan
// with the reason; the engine probes it and resumes by itself when it
// answers again. Both transitions are recorded with their reasons.
func TestAutoResumeAfterUnavailableInstrument(t *testing.T) {
	b := fastSimBench(t, 1000)
	_, c := startDaemon(t, daemon.Config{Bench: b})
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	// The counter stops answering for 6 calls: the first gate and the
	// first five probes.
	if err := simbench.InjectFault(b, simbench.NameCounter, simbench.Fault{Kind: simbench.FaultTimeout, Calls: 6}); err != nil {
		t.Fatal(err)
	}
	sc, err := c.Submit(ctx, client.ChirpSpec(client.Range(-10, 10, 40), client.Options{GateMS: 20}))
	if err != nil {
		t.Fatal(err)
	}
	w := watch(t, ctx, c, sc.Id, 0)
	if w.final.GetState() != glissv1.ScanState_SCAN_STATE_SUCCEEDED {
		t.Fatalf("scan ended %v (%s)", w.final.GetState(), w.final.GetReason())
	}
	for i, p := range w.points {
		if p.Seq != uint64(i) {
			t.Fatalf("point %d has seq %d", i, p.Seq)
		}
	}
	if len(w.points) != 40 {
		t.Errorf("%d points, want 40", len(w.points))
	}
	var paused, resumed *glissv1.Transition
	for _, tr := range w.final.Transitions {
		if tr.To == glissv1.ScanState_SCAN_STATE_PAUSED && paused == nil {
			paused = tr
		}
		if paused != nil && tr.To == glissv1.ScanState_SCAN_STATE_RUNNING && resumed == nil {
			resumed = tr
		}
	}
	if paused == nil || !strings.Contains(paused.Reason, `counter "counter"`) || !strings.Contains(paused.Reason, "resumes by itself") {
		t.Fatalf("pause transition %v: want the counter named and the automatic resume announced", paused)
	}
	if resumed == nil || !strings.Contains(resumed.Reason, "answers again (probe 6)") {
		t.Errorf("resume transition %v: want the automatic resume after the 6th probe", resumed)
	}
}

// An operator's pause while the scan waits for an instrument turns the
// automatic resume off; gliss scan resume continues it.
func TestOperatorHoldStopsAutoResume(t *testing.T) {
	b := fastSimBench(t, 1000)
	_, c := startDaemon(t, daemon.Config{Bench: b})
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	if err := simbench.InjectFault(b, simbench.NameStage, simbench.Fault{Kind: simbench.FaultTimeout}); err != nil {
		t.Fatal(err)
	}
	sc, err := c.Submit(ctx, client.ChirpSpec(client.Range(-10, 10, 5), client.Options{GateMS: 10}))
	if err != nil {
		t.Fatal(err)
	}
	p := waitState(t, ctx, c, sc.Id, glissv1.ScanState_SCAN_STATE_PAUSED)
	if !strings.Contains(p.Reason, "unavailable") || !strings.Contains(p.Reason, `stage "stage"`) {
		t.Errorf("pause reason %q", p.Reason)
	}
	// The driver's error names the stage and its move: the engine does not
	// say it again.
	if n := strings.Count(p.Reason, `stage "stage": move to`); n != 1 {
		t.Errorf("pause reason names the stage's move %d times: %q", n, p.Reason)
	}
	held, err := c.Scans.PauseScan(ctx, &glissv1.PauseScanRequest{Id: sc.Id, Reason: "operator checks the cable"})
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(held.Reason, "no automatic resume") {
		t.Errorf("reason after the operator's hold: %q", held.Reason)
	}
	if err := simbench.ClearFault(b, simbench.NameStage); err != nil {
		t.Fatal(err)
	}
	// Probes would now succeed within milliseconds (speed 1000: 30 s backoff
	// cap → 30 ms); the scan must stay paused.
	time.Sleep(300 * time.Millisecond)
	if sc2, err := c.Get(ctx, sc.Id); err != nil || sc2.State != glissv1.ScanState_SCAN_STATE_PAUSED {
		t.Fatalf("after the operator's hold: %v %v, want PAUSED", sc2.GetState(), err)
	}
	if _, err := c.Scans.ResumeScan(ctx, &glissv1.ResumeScanRequest{Id: sc.Id}); err != nil {
		t.Fatal(err)
	}
	w := watch(t, ctx, c, sc.Id, 0)
	if w.final.GetState() != glissv1.ScanState_SCAN_STATE_SUCCEEDED || len(w.points) != 5 {
		t.Errorf("scan ended %v with %d points", w.final.GetState(), len(w.points))
	}
}
