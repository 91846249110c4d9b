package daemon_test

import (
	"context"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/service/daemon"
)

// streamErr opens a server stream and returns the error of its first
// message (a handler's error arrives with the first Recv).
func streamErr[T any](open func() (interface{ Recv() (T, error) }, error)) error {
	s, err := open()
	if err != nil {
		return err
	}
	_, err = s.Recv()
	return err
}

// TestEveryRPCBadRequests: the bad requests of every RPC not covered by
// TestRequestErrors get the status code that tells the caller what to do,
// with a message naming the field, the value or the state.
func TestEveryRPCBadRequests(t *testing.T) {
	_, c := startDaemon(t, daemon.Config{SimSpeed: 1000})
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	done, err := c.Submit(ctx, client.ChirpSpec(client.Range(-5, 5, 3), client.Options{GateMS: 10}))
	if err != nil {
		t.Fatal(err)
	}
	for _, err := range c.Watch(ctx, done.Id, 0) {
		if err != nil {
			t.Fatal(err)
		}
	}
	check := func(name string, err error, want codes.Code, msgParts ...string) {
		t.Helper()
		if status.Code(err) != want {
			t.Errorf("%s: code %v (%v), want %v", name, status.Code(err), err, want)
			return
		}
		for _, m := range msgParts {
			if !strings.Contains(status.Convert(err).Message(), m) {
				t.Errorf("%s: message %q lacks %q", name, status.Convert(err).Message(), m)
			}
		}
	}
	_, err = c.Scans.SubmitScan(ctx, &glissv1.SubmitScanRequest{})
	check("submit without spec", err, codes.InvalidArgument, "spec")
	_, err = c.Scans.SubmitScan(ctx, &glissv1.SubmitScanRequest{Spec: &glissv1.ScanSpec{GateMs: 10}, ValidateOnly: true})
	check("validate without axes", err, codes.InvalidArgument, "axes")
	_, err = c.Scans.ListScans(ctx, &glissv1.ListScansRequest{PageToken: "not-a-token"})
	check("list with a bad page token", err, codes.InvalidArgument, "page_token")

	err = streamErr(func() (interface {
		Recv() (*glissv1.ScanEvent, error)
	}, error) {
		return c.Scans.WatchScan(ctx, &glissv1.WatchScanRequest{})
	})
	check("watch without id", err, codes.InvalidArgument, "id")
	err = streamErr(func() (interface {
		Recv() (*glissv1.ScanEvent, error)
	}, error) {
		return c.Scans.WatchScan(ctx, &glissv1.WatchScanRequest{Id: "no-such-scan"})
	})
	check("watch unknown id", err, codes.NotFound, "no-such-scan")
	err = streamErr(func() (interface {
		Recv() (*glissv1.Point, error)
	}, error) {
		return c.Scans.ReadPoints(ctx, &glissv1.ReadPointsRequest{})
	})
	check("read points without id", err, codes.InvalidArgument, "id")
	err = streamErr(func() (interface {
		Recv() (*glissv1.Point, error)
	}, error) {
		return c.Scans.ReadPoints(ctx, &glissv1.ReadPointsRequest{Id: "no-such-scan"})
	})
	check("read points unknown id", err, codes.NotFound, "no-such-scan")

	_, err = c.Scans.PauseScan(ctx, &glissv1.PauseScanRequest{})
	check("pause without id", err, codes.InvalidArgument, "id")
	_, err = c.Scans.ResumeScan(ctx, &glissv1.ResumeScanRequest{})
	check("resume without id", err, codes.InvalidArgument, "id")
	_, err = c.Scans.ResumeScan(ctx, &glissv1.ResumeScanRequest{Id: "no-such-scan"})
	check("resume unknown id", err, codes.NotFound, "no-such-scan")
	_, err = c.Scans.CancelScan(ctx, &glissv1.CancelScanRequest{})
	check("cancel without id", err, codes.InvalidArgument, "id")
	_, err = c.Scans.CancelScan(ctx, &glissv1.CancelScanRequest{Id: "no-such-scan"})
	check("cancel unknown id", err, codes.NotFound, "no-such-scan")
	_, err = c.Scans.PauseScan(ctx, &glissv1.PauseScanRequest{Id: done.Id})
	check("pause a finished scan", err, codes.FailedPrecondition, done.Id, "SUCCEEDED")

	_, err = c.Bench.GetInstrument(ctx, &glissv1.GetInstrumentRequest{})
	check("get instrument without name", err, codes.InvalidArgument, "name")
	_, err = c.Bench.SetInstrument(ctx, &glissv1.SetInstrumentRequest{})
	check("set instrument without name", err, codes.InvalidArgument, "name")
	_, err = c.Bench.SetInstrument(ctx, &glissv1.SetInstrumentRequest{Name: "counter", Target: &glissv1.SetInstrumentRequest_StageMm{StageMm: 1}})
	check("stage target for the counter", err, codes.InvalidArgument, "counter")
	_, err = c.Bench.SetInstrument(ctx, &glissv1.SetInstrumentRequest{Name: "stage", Target: &glissv1.SetInstrumentRequest_StageMm{StageMm: 5000}})
	check("stage beyond its travel", err, codes.InvalidArgument, "5000", "travel")

	_, err = c.Audit.ListAudit(ctx, &glissv1.ListAuditRequest{PageSize: 1001})
	check("audit page too large", err, codes.InvalidArgument, "page_size", "1001")
}
