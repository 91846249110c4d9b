package daemon_test

import (
	"context"
	"math"
	"strings"
	"testing"
	"time"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/service/daemon"
)

func fieldsOf(err error) []string {
	var out []string
	for _, d := range status.Convert(err).Details() {
		if br, ok := d.(*errdetails.BadRequest); ok {
			for _, v := range br.FieldViolations {
				out = append(out, v.Field)
			}
		}
	}
	return out
}

// TestBadSpecsRejected: each bad spec is InvalidArgument naming its field,
// and nothing is stored.
func TestBadSpecsRejected(t *testing.T) {
	_, c := startDaemon(t, daemon.Config{})
	ctx := context.Background()
	cases := []struct {
		name  string
		spec  *glissv1.ScanSpec
		field string
	}{
		{"GDD beyond the stretcher", client.ChirpSpec(client.Range(-30, 30, 5), client.Options{}), "spec.axes[0].range.from"},
		{"power above the maximum", client.PowerSpec(client.Range(1, 1000, 5), client.Options{}), "spec.axes[0].range.to"},
		{"NaN power", client.PowerSpec(client.List(1, math.NaN()), client.Options{}), "spec.axes[0].list.values[1]"},
		{"gate zero", &glissv1.ScanSpec{Axes: []*glissv1.Axis{client.Axis(glissv1.AxisKind_AXIS_KIND_GDD_PS2, client.Range(0, 1, 2))}}, "spec.gate_ms"},
		{"empty axis", client.ChirpSpec(client.Range(0, 1, 0), client.Options{}), "spec.axes[0].range.count"},
		{"too large axis", client.ChirpSpec(client.Range(0, 1, 100001), client.Options{}), "spec.axes[0].range.count"},
		{"no axes", &glissv1.ScanSpec{GateMs: 10}, "spec.axes"},
	}
	for _, tc := range cases {
		_, err := c.Submit(ctx, tc.spec)
		if status.Code(err) != codes.InvalidArgument {
			t.Errorf("%s: code %v (%v), want InvalidArgument", tc.name, status.Code(err), err)
			continue
		}
		f := fieldsOf(err)
		if len(f) == 0 || !contains(f, tc.field) {
			t.Errorf("%s: BadRequest fields %v, want %q", tc.name, f, tc.field)
		}
	}
	list, err := c.Scans.ListScans(ctx, &glissv1.ListScansRequest{})
	if err != nil {
		t.Fatal(err)
	}
	if len(list.Scans) != 0 {
		t.Errorf("%d scans stored after rejected submissions", len(list.Scans))
	}
}

func contains(s []string, x string) bool {
	for _, v := range s {
		if v == x {
			return true
		}
	}
	return false
}

// TestRequestErrors: bad requests of every RPC get a status code a caller can act on.
func TestRequestErrors(t *testing.T) {
	_, c := startDaemon(t, daemon.Config{SimSpeed: 20})
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()

	done, err := c.Submit(ctx, client.ChirpSpec(client.Range(-5, 5, 3), client.Options{GateMS: 10}))
	if err != nil {
		t.Fatal(err)
	}
	for ev, err := range c.Watch(ctx, done.Id, 0) {
		if err != nil {
			t.Fatal(err)
		}
		_ = ev
	}
	// A long scan that holds the bench.
	long, err := c.Submit(ctx, client.ChirpSpec(client.Range(-20, 20, 400), client.Options{GateMS: 1000}))
	if err != nil {
		t.Fatal(err)
	}
	waitState(t, ctx, c, long.Id, glissv1.ScanState_SCAN_STATE_RUNNING)

	check := func(name string, err error, want codes.Code, msgPart string) {
		t.Helper()
		if status.Code(err) != want {
			t.Errorf("%s: code %v (%v), want %v", name, status.Code(err), err, want)
			return
		}
		if msgPart != "" && !strings.Contains(status.Convert(err).Message(), msgPart) {
			t.Errorf("%s: message %q lacks %q", name, status.Convert(err).Message(), msgPart)
		}
	}
	_, err = c.Scans.GetScan(ctx, &glissv1.GetScanRequest{})
	check("get without id", err, codes.InvalidArgument, "id")
	_, err = c.Scans.GetScan(ctx, &glissv1.GetScanRequest{Id: "nope"})
	check("get unknown id", err, codes.NotFound, "nope")
	_, err = c.Scans.PauseScan(ctx, &glissv1.PauseScanRequest{Id: "nope"})
	check("pause unknown id", err, codes.NotFound, "")
	_, err = c.Scans.ResumeScan(ctx, &glissv1.ResumeScanRequest{Id: done.Id})
	check("resume a finished scan", err, codes.FailedPrecondition, "SUCCEEDED")
	_, err = c.Scans.CancelScan(ctx, &glissv1.CancelScanRequest{Id: done.Id})
	check("cancel a finished scan", err, codes.FailedPrecondition, "SUCCEEDED")
	_, err = c.Scans.PauseScan(ctx, &glissv1.PauseScanRequest{Id: done.Id})
	check("pause a finished scan", err, codes.FailedPrecondition, "")
	_, err = c.Scans.ListScans(ctx, &glissv1.ListScansRequest{PageSize: 5000})
	check("list page too large", err, codes.InvalidArgument, "page_size")
	_, err = c.Bench.SetInstrument(ctx, &glissv1.SetInstrumentRequest{Name: "stage", Target: &glissv1.SetInstrumentRequest_StageMm{StageMm: 10}})
	check("manual move while a scan runs", err, codes.FailedPrecondition, long.Id)
	_, err = c.Bench.GetInstrument(ctx, &glissv1.GetInstrumentRequest{Name: "nope"})
	check("unknown instrument", err, codes.InvalidArgument, "nope")
	_, err = c.Bench.SetInstrument(ctx, &glissv1.SetInstrumentRequest{Name: "stage"})
	check("set without target", err, codes.InvalidArgument, "target")

	// Pause, then resume, then cancel the long scan: stored points are kept.
	if _, err := c.Scans.PauseScan(ctx, &glissv1.PauseScanRequest{Id: long.Id, Reason: "test pause"}); err != nil {
		t.Fatal(err)
	}
	paused := waitState(t, ctx, c, long.Id, glissv1.ScanState_SCAN_STATE_PAUSED)
	if paused.Reason != "test pause" {
		t.Errorf("pause reason %q", paused.Reason)
	}
	if _, err := c.Scans.ResumeScan(ctx, &glissv1.ResumeScanRequest{Id: long.Id}); err != nil {
		t.Fatal(err)
	}
	waitState(t, ctx, c, long.Id, glissv1.ScanState_SCAN_STATE_RUNNING)
	if _, err := c.Scans.CancelScan(ctx, &glissv1.CancelScanRequest{Id: long.Id, Reason: "enough"}); err != nil {
		t.Fatal(err)
	}
	final := waitState(t, ctx, c, long.Id, glissv1.ScanState_SCAN_STATE_CANCELLED)
	var n uint64
	for p, err := range c.Points(ctx, long.Id, 0) {
		if err != nil {
			t.Fatal(err)
		}
		if p.Seq != n {
			t.Fatalf("point %d has seq %d", n, p.Seq)
		}
		n++
	}
	if n != final.PointsStored || n == 0 {
		t.Errorf("cancelled scan: %d points readable, %d recorded", n, final.PointsStored)
	}
	// Manual commands work once the bench is free.
	in, err := c.Bench.SetInstrument(ctx, &glissv1.SetInstrumentRequest{Name: "stage", Target: &glissv1.SetInstrumentRequest_GddPs2{GddPs2: 10}})
	if err != nil {
		t.Fatalf("manual move after cancel: %v", err)
	}
	if math.Abs(in.State.GetGddPs2()-10) > 1e-3 {
		t.Errorf("stage at %v ps² after a move to 10 ps²", in.State.GetGddPs2())
	}
	var sawStates []glissv1.ScanState
	for _, tr := range final.Transitions {
		sawStates = append(sawStates, tr.To)
		if tr.At == nil || tr.Reason == "" {
			t.Errorf("transition %v without time or reason", tr)
		}
	}
	want := []glissv1.ScanState{glissv1.ScanState_SCAN_STATE_QUEUED, glissv1.ScanState_SCAN_STATE_RUNNING, glissv1.ScanState_SCAN_STATE_PAUSED, glissv1.ScanState_SCAN_STATE_RUNNING, glissv1.ScanState_SCAN_STATE_CANCELLED}
	if !equalStates(sawStates, want) {
		t.Errorf("transitions %v, want %v", sawStates, want)
	}
}

func waitState(t *testing.T, ctx context.Context, c *client.Client, id string, want glissv1.ScanState) *glissv1.Scan {
	t.Helper()
	for {
		sc, err := c.Get(ctx, id)
		if err != nil {
			t.Fatal(err)
		}
		if sc.State == want {
			return sc
		}
		if client.IsTerminal(sc.State) {
			t.Fatalf("scan %s ended %v (%s) while waiting for %v", id, sc.State, sc.Reason, want)
		}
		select {
		case <-ctx.Done():
			t.Fatalf("scan %s: still %v, waiting for %v", id, sc.State, want)
		case <-time.After(5 * time.Millisecond):
		}
	}
}
