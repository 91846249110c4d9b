package store

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math"
	"os"
	"slices"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	bolt "go.etcd.io/bbolt"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"
)

var ctx = context.Background()

func TestScanRecords(t *testing.T) {
	s, _ := openTest(t, Options{})
	base := testScan("01A", "rabi at 0 ps²", glissv1.ScanState_SCAN_STATE_QUEUED, t0)
	if err := s.CreateScan(ctx, base); err != nil {
		t.Fatal(err)
	}
	appendRange(t, s, "01A", 0, 3)

	running := proto.Clone(base).(*glissv1.Scan)
	running.State = glissv1.ScanState_SCAN_STATE_RUNNING
	running.StartedAt = timestamppb.New(t0.Add(time.Second))
	running.PointsStored = 999 // the store's count wins

	tests := []struct {
		name    string
		do      func() error
		wantErr error
	}{
		{"create taken id", func() error { return s.CreateScan(ctx, testScan("01A", "other", 0, t0)) }, ErrExists},
		{"create empty id", func() error { return s.CreateScan(ctx, testScan("", "x", 0, t0)) }, ErrInvalid},
		{"create long id", func() error { return s.CreateScan(ctx, testScan(strings.Repeat("a", MaxScanIDBytes+1), "x", 0, t0)) }, ErrInvalid},
		{"create nil", func() error { return s.CreateScan(ctx, nil) }, ErrInvalid},
		{"put absent", func() error { return s.PutScan(ctx, testScan("01Z", "x", 0, t0)) }, ErrNotFound},
		{"get absent", func() error { _, err := s.GetScan("01Z"); return err }, ErrNotFound},
		{"count absent", func() error { _, err := s.PointCount("01Z"); return err }, ErrNotFound},
		{"get empty id", func() error { _, err := s.GetScan(""); return err }, ErrNotFound},
		{"count empty id", func() error { _, err := s.PointCount(""); return err }, ErrNotFound},
		{"read empty id", func() error { return s.ReadPoints(ctx, "", 0, func(*glissv1.Point) error { return nil }) }, ErrNotFound},
		{"put running", func() error { return s.PutScan(ctx, running) }, nil},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			err := tc.do()
			if !errors.Is(err, tc.wantErr) || (tc.wantErr == nil) != (err == nil) {
				t.Fatalf("err = %v, want %v", err, tc.wantErr)
			}
		})
	}

	got, err := s.GetScan("01A")
	if err != nil {
		t.Fatal(err)
	}
	want := proto.Clone(running).(*glissv1.Scan)
	want.PointsStored = 3
	if !proto.Equal(got, want) {
		t.Fatalf("GetScan = %v\nwant %v", got, want)
	}
	// The caller's record is not changed by the store.
	if running.PointsStored != 999 {
		t.Fatalf("PutScan changed the caller's record: points_stored %d", running.PointsStored)
	}
	if err := s.Check(); err != nil {
		t.Fatal(err)
	}
}

// A record update queued after points is committed after them, so its
// points_stored counts them.
func TestPutScanAfterPoints(t *testing.T) {
	s, _ := openTest(t, Options{MaxDelay: 5 * time.Millisecond})
	sc := testScan("01B", "order", glissv1.ScanState_SCAN_STATE_RUNNING, t0)
	if err := s.CreateScan(ctx, sc); err != nil {
		t.Fatal(err)
	}
	r := newResults()
	for seq := uint64(0); seq < 100; seq++ {
		if err := s.AppendPoint(ctx, testPoint("01B", seq), r.done(seq)); err != nil {
			t.Fatal(err)
		}
	}
	sc.State = glissv1.ScanState_SCAN_STATE_SUCCEEDED
	if err := s.PutScan(ctx, sc); err != nil {
		t.Fatal(err)
	}
	// PutScan returned: every point queued before it has had its callback.
	if n := func() int { r.mu.Lock(); defer r.mu.Unlock(); return r.n }(); n != 100 {
		t.Fatalf("%d callbacks done when PutScan returned, want 100", n)
	}
	got, err := s.GetScan("01B")
	if err != nil {
		t.Fatal(err)
	}
	if got.GetPointsStored() != 100 || got.GetState() != glissv1.ScanState_SCAN_STATE_SUCCEEDED {
		t.Fatalf("points_stored %d state %v, want 100 SUCCEEDED", got.GetPointsStored(), got.GetState())
	}
}

func TestListScans(t *testing.T) {
	s, _ := openTest(t, Options{})
	type rec struct {
		id    string
		name  string
		state glissv1.ScanState
		at    time.Duration
	}
	const (
		q  = glissv1.ScanState_SCAN_STATE_QUEUED
		ru = glissv1.ScanState_SCAN_STATE_RUNNING
		ok = glissv1.ScanState_SCAN_STATE_SUCCEEDED
		f  = glissv1.ScanState_SCAN_STATE_FAILED
	)
	recs := []rec{
		{"s1", "Rabi power sweep", ok, 1 * time.Hour},
		{"s2", "chirp map", f, 2 * time.Hour},
		{"s3", "rabi at +10 ps²", ok, 3 * time.Hour},
		{"s4", "detuning scan", ru, 4 * time.Hour},
		{"s5b", "chirp × power RABI", q, 5 * time.Hour},
		{"s5a", "same second", q, 5 * time.Hour}, // tie on created_at: id decides
		{"s0", "before the epoch", ok, -60 * 365 * 24 * time.Hour},
	}
	for _, r := range recs {
		if err := s.CreateScan(ctx, testScan(r.id, r.name, r.state, t0.Add(r.at))); err != nil {
			t.Fatal(err)
		}
	}
	// Newest first by (created_at, id): s5b > s5a at the same time.
	all := []string{"s5b", "s5a", "s4", "s3", "s2", "s1", "s0"}
	tests := []struct {
		name string
		f    ListFilter
		want []string
	}{
		{"all default page", ListFilter{}, all},
		{"page 1", ListFilter{PageSize: 1}, all},
		{"page 2", ListFilter{PageSize: 2}, all},
		{"page 3", ListFilter{PageSize: 3}, all},
		{"page 7", ListFilter{PageSize: 7}, all},
		{"succeeded", ListFilter{States: []glissv1.ScanState{ok}}, []string{"s3", "s1", "s0"}},
		{"succeeded or queued, paged", ListFilter{PageSize: 2, States: []glissv1.ScanState{ok, q}}, []string{"s5b", "s5a", "s3", "s1", "s0"}},
		{"name rabi any case", ListFilter{NameContains: "RaBi"}, []string{"s5b", "s3", "s1"}},
		{"name and state", ListFilter{PageSize: 1, NameContains: "rabi", States: []glissv1.ScanState{ok}}, []string{"s3", "s1"}},
		{"no match", ListFilter{NameContains: "nothing like it"}, nil},
		{"cancelled none", ListFilter{States: []glissv1.ScanState{glissv1.ScanState_SCAN_STATE_CANCELLED}}, nil},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			var got []string
			f := tc.f
			for pages := 0; ; pages++ {
				if pages > len(recs)+1 {
					t.Fatal("paging does not end")
				}
				page, next, err := s.ListScans(f)
				if err != nil {
					t.Fatal(err)
				}
				size := f.PageSize
				if size == 0 {
					size = DefaultPageSize
				}
				if len(page) > size {
					t.Fatalf("page of %d, page size %d", len(page), size)
				}
				if next != "" && len(page) != size {
					t.Fatalf("short page of %d with a next token", len(page))
				}
				for _, sc := range page {
					got = append(got, sc.GetId())
				}
				if next == "" {
					break
				}
				f.PageToken = next
			}
			if !slices.Equal(got, tc.want) {
				t.Fatalf("ids %v, want %v", got, tc.want)
			}
		})
	}

	// A record whose created_at changes moves in the listing.
	moved := testScan("s1", "Rabi power sweep", ok, t0.Add(10*time.Hour))
	if err := s.PutScan(ctx, moved); err != nil {
		t.Fatal(err)
	}
	page, _, err := s.ListScans(ListFilter{PageSize: 2})
	if err != nil {
		t.Fatal(err)
	}
	if page[0].GetId() != "s1" || page[1].GetId() != "s5b" {
		t.Fatalf("after moving s1: first ids %s %s, want s1 s5b", page[0].GetId(), page[1].GetId())
	}

	bad := []ListFilter{
		{PageSize: -1},
		{PageSize: MaxPageSize + 1},
		{PageToken: "not base64!"},
		{PageToken: encodePageToken([]byte("short"))},
		{PageToken: "AQ"},
	}
	for _, f := range bad {
		if _, _, err := s.ListScans(f); !errors.Is(err, ErrInvalid) {
			t.Errorf("ListScans(%+v) err = %v, want ErrInvalid", f, err)
		}
	}
	if err := s.Check(); err != nil {
		t.Fatal(err)
	}
}

func TestAppendPointSequence(t *testing.T) {
	s, _ := openTest(t, Options{})
	if err := s.CreateScan(ctx, testScan("01C", "seq", glissv1.ScanState_SCAN_STATE_RUNNING, t0)); err != nil {
		t.Fatal(err)
	}
	appendRange(t, s, "01C", 0, 5) // stored: 0 … 4
	tests := []struct {
		name    string
		id      string
		seq     uint64
		wantErr error
	}{
		{"duplicate of last", "01C", 4, ErrSequence},
		{"duplicate of first", "01C", 0, ErrSequence},
		{"gap", "01C", 6, ErrSequence},
		{"unknown scan", "01X", 0, ErrNotFound},
		{"next", "01C", 5, nil},
		{"next again", "01C", 6, nil},
		{"duplicate in the same batch", "01C", 6, ErrSequence},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r := newResults()
			p := testPoint(tc.id, tc.seq)
			p.Counts[0] = 424242 // marks a point that must not replace a stored one
			if err := s.AppendPoint(ctx, p, r.done(tc.seq)); err != nil {
				t.Fatal(err)
			}
			r.wg.Wait()
			err, _ := r.get(tc.seq)
			if !errors.Is(err, tc.wantErr) || (tc.wantErr == nil) != (err == nil) {
				t.Fatalf("done err = %v, want %v", err, tc.wantErr)
			}
		})
	}
	n, err := s.PointCount("01C")
	if err != nil || n != 7 {
		t.Fatalf("PointCount = %d, %v; want 7", n, err)
	}
	for _, p := range readAll(t, s, "01C", 0) {
		want := testPoint("01C", p.GetSeq())
		if p.GetSeq() >= 5 {
			want.Counts[0] = 424242
		}
		if !proto.Equal(p, want) {
			t.Fatalf("point %d changed: %v", p.GetSeq(), p)
		}
	}
	// Invalid points are refused at once and done is never called.
	called := false
	if err := s.AppendPoint(ctx, &glissv1.Point{Seq: 7}, func(*glissv1.Point, error) { called = true }); !errors.Is(err, ErrInvalid) {
		t.Fatalf("point without scan id: err = %v, want ErrInvalid", err)
	}
	if err := s.AppendPoint(ctx, nil, nil); !errors.Is(err, ErrInvalid) {
		t.Fatalf("nil point: err = %v, want ErrInvalid", err)
	}
	if err := s.Sync(ctx); err != nil {
		t.Fatal(err)
	}
	if called {
		t.Fatal("done called for a refused point")
	}
	cancelled, cancel := context.WithCancel(ctx)
	cancel()
	if err := s.AppendPoint(cancelled, testPoint("01C", 7), func(*glissv1.Point, error) { called = true }); !errors.Is(err, context.Canceled) {
		t.Fatalf("cancelled ctx: err = %v", err)
	}
	if err := s.Sync(ctx); err != nil || called {
		t.Fatalf("after cancelled append: sync %v, done called %v", err, called)
	}
}

func TestReadPoints(t *testing.T) {
	s, _ := openTest(t, Options{})
	if err := s.CreateScan(ctx, testScan("01D", "read", glissv1.ScanState_SCAN_STATE_RUNNING, t0)); err != nil {
		t.Fatal(err)
	}
	if err := s.CreateScan(ctx, testScan("01E", "empty", glissv1.ScanState_SCAN_STATE_QUEUED, t0)); err != nil {
		t.Fatal(err)
	}
	const n = 2*readChunk + 77 // crosses chunk boundaries
	appendRange(t, s, "01D", 0, n)
	tests := []struct {
		name string
		id   string
		from uint64
		want uint64 // points expected
	}{
		{"from 0", "01D", 0, n},
		{"from the middle", "01D", 700, n - 700},
		{"from a chunk boundary", "01D", readChunk, n - readChunk},
		{"last one", "01D", n - 1, 1},
		{"past the end", "01D", n, 0},
		{"far past the end", "01D", 1 << 62, 0},
		{"empty scan", "01E", 0, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got := readAll(t, s, tc.id, tc.from)
			if uint64(len(got)) != tc.want {
				t.Fatalf("%d points, want %d", len(got), tc.want)
			}
			for i, p := range got {
				if !proto.Equal(p, testPoint(tc.id, tc.from+uint64(i))) {
					t.Fatalf("point %d: got %v", i, p)
				}
			}
		})
	}
	if err := s.ReadPoints(ctx, "nope", 0, func(*glissv1.Point) error { return nil }); !errors.Is(err, ErrNotFound) {
		t.Fatalf("unknown scan: err = %v, want ErrNotFound", err)
	}
	stop := errors.New("enough")
	seen := 0
	if err := s.ReadPoints(ctx, "01D", 0, func(*glissv1.Point) error {
		if seen++; seen == 600 {
			return stop
		}
		return nil
	}); err != stop || seen != 600 {
		t.Fatalf("fn error: err = %v after %d points, want %v after 600", err, seen, stop)
	}
	cctx, cancel := context.WithCancel(ctx)
	seen = 0
	err := s.ReadPoints(cctx, "01D", 0, func(*glissv1.Point) error {
		if seen++; seen == 10 {
			cancel()
		}
		return nil
	})
	if !errors.Is(err, context.Canceled) || seen != readChunk {
		t.Fatalf("cancelled read: err = %v after %d points, want Canceled after one chunk (%d)", err, seen, readChunk)
	}
}

func TestCloseDrains(t *testing.T) {
	// MaxDelay far longer than the test: only Close can make the writer
	// commit the points (a record update commits at once: its caller waits).
	s, path := openTest(t, Options{MaxDelay: time.Hour})
	if err := s.CreateScan(ctx, testScan("01F", "drain", glissv1.ScanState_SCAN_STATE_RUNNING, t0)); err != nil {
		t.Fatal(err)
	}
	const n = 500
	r := newResults()
	for seq := uint64(0); seq < n; seq++ {
		if err := s.AppendPoint(ctx, testPoint("01F", seq), r.done(seq)); err != nil {
			t.Fatal(err)
		}
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	r.mu.Lock()
	for seq := uint64(0); seq < n; seq++ {
		if err, ok := r.errs[seq]; !ok || err != nil {
			t.Fatalf("point %d: done called %v, err %v when Close returned", seq, ok, err)
		}
	}
	r.mu.Unlock()
	tests := []struct {
		name string
		do   func() error
	}{
		{"append", func() error { return s.AppendPoint(ctx, testPoint("01F", n), nil) }},
		{"create", func() error { return s.CreateScan(ctx, testScan("01G", "x", 0, t0)) }},
		{"sync", func() error { return s.Sync(ctx) }},
		{"get", func() error { _, err := s.GetScan("01F"); return err }},
		{"read", func() error { return s.ReadPoints(ctx, "01F", 0, func(*glissv1.Point) error { return nil }) }},
		{"check", s.Check},
		{"close again", s.Close},
	}
	for _, tc := range tests {
		if err := tc.do(); !errors.Is(err, ErrClosed) {
			t.Errorf("%s after Close: err = %v, want ErrClosed", tc.name, err)
		}
	}
	s2, err := Open(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	if got, err := s2.PointCount("01F"); err != nil || got != n {
		t.Fatalf("after reopen: %d points, %v; want %d", got, err, n)
	}
	if err := s2.Check(); err != nil {
		t.Fatal(err)
	}
}

// Group commit: MaxBatch caps items per transaction, MaxDelay gathers.
func TestBatching(t *testing.T) {
	tests := []struct {
		name       string
		o          Options
		points     uint64
		minCommits uint64
		maxCommits uint64
	}{
		// 1000 points, at most 10 per commit: at least 100 commits.
		{"MaxBatch 10", Options{MaxBatch: 10}, 1000, 100, 1000},
		// A queue gathered for up to an hour is committed only by the Sync (one commit).
		{"MaxDelay 1 h", Options{MaxDelay: time.Hour}, 1000, 1, 1},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			s, _ := openTest(t, tc.o)
			if err := s.CreateScan(ctx, testScan("01H", "batch", 0, t0)); err != nil {
				t.Fatal(err)
			}
			before := s.Stats()
			r := newResults()
			for seq := uint64(0); seq < tc.points; seq++ {
				if err := s.AppendPoint(ctx, testPoint("01H", seq), r.done(seq)); err != nil {
					t.Fatal(err)
				}
			}
			if err := s.Sync(ctx); err != nil {
				t.Fatal(err)
			}
			after := s.Stats()
			commits := after.Commits - before.Commits
			if commits < tc.minCommits || commits > tc.maxCommits {
				t.Fatalf("%d commits for %d points, want %d … %d", commits, tc.points, tc.minCommits, tc.maxCommits)
			}
			// Every point is one item (the Sync writes nothing).
			if items := after.Items - before.Items; items != tc.points {
				t.Fatalf("Stats: %d items committed for %d points", items, tc.points)
			}
			// Every commit is in one commit-time bucket.
			d := after.Sub(before)
			var timed uint64
			for _, c := range d.CommitTimes {
				timed += c
			}
			if timed != commits || d.Commits != commits || d.CommitTimeQuantile(1) == 0 {
				t.Fatalf("Stats: %d commits, %d in the commit-time buckets (max ≤ %v)", commits, timed, d.CommitTimeQuantile(1))
			}
			if n, _ := s.PointCount("01H"); n != tc.points {
				t.Fatalf("%d points stored, want %d", n, tc.points)
			}
		})
	}
}

func TestAudit(t *testing.T) {
	s, _ := openTest(t, Options{})
	const n = 7
	for i := 0; i < n; i++ {
		e := AuditEntry{At: t0.Add(time.Duration(i) * time.Minute), Who: "uid:1000", Method: "/gliss.v1.ScanService/CancelScan", Target: fmt.Sprintf("scan-%d", i), Outcome: "ok"}
		if err := s.AppendAudit(ctx, e); err != nil {
			t.Fatal(err)
		}
	}
	for _, size := range []int{0, 1, 3, 7} {
		var got []string
		f := AuditFilter{PageSize: size}
		for pages := 0; ; pages++ {
			if pages > n+1 {
				t.Fatal("paging does not end")
			}
			page, next, err := s.ListAudit(f)
			if err != nil {
				t.Fatal(err)
			}
			for _, e := range page {
				got = append(got, e.Target)
				if !e.At.Equal(t0.Add(time.Duration(e.Target[5]-'0') * time.Minute)) {
					t.Fatalf("entry %s at %v", e.Target, e.At)
				}
			}
			if next == "" {
				break
			}
			f.PageToken = next
		}
		want := []string{"scan-6", "scan-5", "scan-4", "scan-3", "scan-2", "scan-1", "scan-0"}
		if !slices.Equal(got, want) {
			t.Fatalf("page size %d: %v, want %v", size, got, want)
		}
	}
	if _, _, err := s.ListAudit(AuditFilter{PageToken: "xyz"}); !errors.Is(err, ErrInvalid) {
		t.Fatalf("bad token: err = %v, want ErrInvalid", err)
	}
	if err := s.AppendAudit(ctx, AuditEntry{Who: strings.Repeat("w", maxAuditFieldBytes+1)}); !errors.Is(err, ErrInvalid) {
		t.Fatalf("long field: err = %v, want ErrInvalid", err)
	}
}

func TestMain(m *testing.M) {
	if runCrashChild() {
		return
	}
	m.Run()
}

// The queue is bounded: with the writer held up, AppendPoint blocks once the
// queue is full and gives up when its context ends, without calling done.
func TestQueueFullHonoursContext(t *testing.T) {
	entered := make(chan struct{}, 16)
	release := make(chan struct{})
	var hold atomic.Bool
	s, _ := openTest(t, Options{MaxBatch: 1, beforeCommit: func() error {
		if hold.Load() {
			entered <- struct{}{}
			<-release
		}
		return nil
	}})
	if err := s.CreateScan(ctx, testScan("01Q", "queue", glissv1.ScanState_SCAN_STATE_RUNNING, t0)); err != nil {
		t.Fatal(err)
	}
	hold.Store(true)
	r := newResults()
	if err := s.AppendPoint(ctx, testPoint("01Q", 0), r.done(0)); err != nil {
		t.Fatal(err)
	}
	<-entered // the writer is inside the commit of point 0
	capacity := cap(s.queue)
	for seq := uint64(1); seq <= uint64(capacity); seq++ {
		if err := s.AppendPoint(ctx, testPoint("01Q", seq), r.done(seq)); err != nil {
			t.Fatal(err)
		}
	}
	short, cancel := context.WithTimeout(ctx, 50*time.Millisecond)
	defer cancel()
	called := false
	err := s.AppendPoint(short, testPoint("01Q", uint64(capacity)+1), func(*glissv1.Point, error) { called = true })
	if !errors.Is(err, context.DeadlineExceeded) {
		t.Fatalf("append to a full queue: err = %v, want DeadlineExceeded", err)
	}
	hold.Store(false)
	close(release)
	r.wg.Wait()
	for seq := uint64(0); seq <= uint64(capacity); seq++ {
		if err, _ := r.get(seq); err != nil {
			t.Fatalf("point %d: %v", seq, err)
		}
	}
	if err := s.Sync(ctx); err != nil {
		t.Fatal(err)
	}
	if called {
		t.Fatal("done called for the point that was never queued")
	}
	if n, _ := s.PointCount("01Q"); n != uint64(capacity)+1 {
		t.Fatalf("%d points stored, want %d", n, capacity+1)
	}
}

// Several scans written at once by their own goroutines keep their order.
func TestConcurrentScans(t *testing.T) {
	s, _ := openTest(t, Options{MaxBatch: 64})
	const scans, n = 4, 500
	var wg sync.WaitGroup
	for k := 0; k < scans; k++ {
		id := fmt.Sprintf("01R%d", k)
		if err := s.CreateScan(ctx, testScan(id, "parallel", glissv1.ScanState_SCAN_STATE_RUNNING, t0.Add(time.Duration(k)*time.Second))); err != nil {
			t.Fatal(err)
		}
		wg.Add(1)
		go func() {
			defer wg.Done()
			var failed atomic.Int64
			for seq := uint64(0); seq < n; seq++ {
				if err := s.AppendPoint(ctx, testPoint(id, seq), func(_ *glissv1.Point, err error) {
					if err != nil {
						failed.Add(1)
					}
				}); err != nil {
					t.Error(err)
					return
				}
				if seq%100 == 0 {
					if _, err := s.GetScan(id); err != nil {
						t.Error(err)
					}
				}
			}
			if err := s.Sync(ctx); err != nil || failed.Load() > 0 {
				t.Errorf("scan %s: sync %v, %d failed", id, err, failed.Load())
			}
		}()
	}
	wg.Wait()
	for k := 0; k < scans; k++ {
		id := fmt.Sprintf("01R%d", k)
		pts := readAll(t, s, id, 0)
		if len(pts) != n {
			t.Fatalf("scan %s: %d points, want %d", id, len(pts), n)
		}
		for i, p := range pts {
			if !proto.Equal(p, testPoint(id, uint64(i))) {
				t.Fatalf("scan %s point %d changed", id, i)
			}
		}
	}
	if err := s.Check(); err != nil {
		t.Fatal(err)
	}
}

func TestOpenOptions(t *testing.T) {
	dir := t.TempDir()
	tests := []struct {
		name  string
		path  string
		o     Options
		field string // named in the error; "" when Open must succeed
	}{
		{"defaults", dir + "/a.db", Options{}, ""},
		{"negative MaxBatch", dir + "/b.db", Options{MaxBatch: -1}, "MaxBatch -1"},
		{"huge MaxBatch", dir + "/b.db", Options{MaxBatch: MaxBatchLimit + 1}, "MaxBatch 65537"},
		{"negative MaxDelay", dir + "/b.db", Options{MaxDelay: -time.Millisecond}, "MaxDelay -1ms"},
		{"negative LockTimeout", dir + "/b.db", Options{LockTimeout: -time.Second}, "LockTimeout -1s"},
		{"missing directory", dir + "/no/such/dir/c.db", Options{}, dir + "/no/such/dir/c.db"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			s, err := Open(tc.path, tc.o)
			if tc.field == "" {
				if err != nil {
					t.Fatal(err)
				}
				if err := s.Close(); err != nil {
					t.Fatal(err)
				}
				return
			}
			if err == nil {
				s.Close()
				t.Fatal("Open succeeded")
			}
			if !strings.Contains(err.Error(), tc.field) {
				t.Fatalf("error %q does not name %q", err, tc.field)
			}
		})
	}
	// A file that is not a gliss store is refused, naming the file.
	if err := os.WriteFile(dir+"/junk.db", bytes.Repeat([]byte("not a database "), 1000), 0o600); err != nil {
		t.Fatal(err)
	}
	if s, err := Open(dir+"/junk.db", Options{}); err == nil || !strings.Contains(err.Error(), dir+"/junk.db") {
		if s != nil {
			s.Close()
		}
		t.Fatalf("Open of a junk file: %v", err)
	}
	// A store of a layout this code does not know is refused, not rewritten.
	db, err := bolt.Open(dir+"/future.db", 0o600, &bolt.Options{Timeout: time.Second})
	if err != nil {
		t.Fatal(err)
	}
	err = db.Update(func(tx *bolt.Tx) error {
		m, err := tx.CreateBucket(bucketMeta)
		if err != nil {
			return err
		}
		return m.Put(keyLayout, []byte("2"))
	})
	db.Close()
	if err != nil {
		t.Fatal(err)
	}
	if s, err := Open(dir+"/future.db", Options{}); err == nil || !strings.Contains(err.Error(), `layout version "2"`) {
		if s != nil {
			s.Close()
		}
		t.Fatalf("Open of a layout-2 file: %v", err)
	}
}

// The quantile is the bound of the bucket that holds it.
func TestCommitTimeQuantile(t *testing.T) {
	var s Stats
	if s.CommitTimeQuantile(0.99) != 0 {
		t.Fatal("quantile of no commits is not 0")
	}
	for _, c := range []struct {
		d time.Duration
		n uint64
	}{{50 * time.Microsecond, 90}, {time.Millisecond, 9}, {time.Hour, 1}} {
		s.CommitTimes[commitBucket(c.d)] += c.n
	}
	for _, c := range []struct {
		q    float64
		want time.Duration
	}{{0.5, 62500 * time.Nanosecond}, {0.9, 62500 * time.Nanosecond}, {0.95, time.Millisecond}, {0.99, time.Millisecond}, {1, math.MaxInt64}} {
		if got := s.CommitTimeQuantile(c.q); got != c.want {
			t.Errorf("q %v: %v, want %v", c.q, got, c.want)
		}
	}
	if b := commitBucket(CommitBucketBound(3) + 1); b != 4 {
		t.Errorf("just above bound 3: bucket %d, want 4", b)
	}
}

// Points the hand-written encoder declines (here: one with a field this
// build does not know) go through proto.Marshal into the same arena, beside
// points it encodes, across chunk boundaries: every stored record is its
// point exactly.
func TestArenaFallbackAndChunks(t *testing.T) {
	s, _ := openTest(t, Options{})
	const id, n = "01AR", 1200 // ~250 KB of records: several 64 KiB chunks
	if err := s.CreateScan(ctx, testScan(id, "arena", glissv1.ScanState_SCAN_STATE_RUNNING, t0)); err != nil {
		t.Fatal(err)
	}
	want := make([]*glissv1.Point, n)
	for seq := range uint64(n) {
		p := testPoint(id, seq)
		if seq%7 == 3 {
			// field 99, varint 5: unknown to Point
			p.ProtoReflect().SetUnknown([]byte{0x98, 0x06, 0x05})
		}
		want[seq] = p
	}
	r := newResults()
	for seq, p := range want {
		if err := s.AppendPoint(ctx, p, r.done(uint64(seq))); err != nil {
			t.Fatal(err)
		}
	}
	r.wg.Wait()
	got := readAll(t, s, id, 0)
	if len(got) != n {
		t.Fatalf("%d points stored, want %d", len(got), n)
	}
	for i := range got {
		if !proto.Equal(got[i], want[i]) {
			t.Fatalf("point %d: stored %v, appended %v", i, got[i], want[i])
		}
	}
}
