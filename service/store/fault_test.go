package store

import (
	"errors"
	"log/slog"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	bolt "go.etcd.io/bbolt"
	berrors "go.etcd.io/bbolt/errors"
	"google.golang.org/protobuf/proto"
)

var errInjected = errors.New("injected: input/output error")

// quiet drops the store's logs of the faults these tests cause on purpose.
var quiet = slog.New(slog.DiscardHandler)

// A failing commit fails exactly the items of that transaction, keeps what
// was committed, and the store works again once the cause is gone.
func TestWriteFault(t *testing.T) {
	var failing atomic.Bool
	o := Options{MaxDelay: time.Hour, Logger: quiet, beforeCommit: func() error {
		if failing.Load() {
			return errInjected
		}
		return nil
	}}
	s, _ := openTest(t, o)
	if err := s.CreateScan(ctx, testScan("01W", "fault", glissv1.ScanState_SCAN_STATE_RUNNING, t0)); err != nil {
		t.Fatal(err)
	}
	appendSync := func(from, to uint64) (*results, error) {
		r := newResults()
		for seq := from; seq < to; seq++ {
			if err := s.AppendPoint(ctx, testPoint("01W", seq), r.done(seq)); err != nil {
				t.Fatal(err)
			}
		}
		err := s.Sync(ctx) // MaxDelay is an hour: the Sync makes the one commit
		r.wg.Wait()
		return r, err
	}
	if _, err := appendSync(0, 10); err != nil {
		t.Fatal(err)
	}

	failing.Store(true)
	r, err := appendSync(10, 15)
	if !errors.Is(err, errInjected) {
		t.Fatalf("Sync after a failed commit: %v, want the commit error", err)
	}
	for seq := uint64(10); seq < 15; seq++ {
		if err, _ := r.get(seq); !errors.Is(err, errInjected) {
			t.Fatalf("point %d: done err %v, want the commit error", seq, err)
		}
	}
	sc := testScan("01W", "fault", glissv1.ScanState_SCAN_STATE_PAUSED, t0)
	if err := s.PutScan(ctx, sc); !errors.Is(err, errInjected) {
		t.Fatalf("PutScan during the fault: %v", err)
	}
	if err := s.Sync(ctx); !errors.Is(err, errInjected) {
		t.Fatalf("Sync after the failed PutScan: %v, want its commit error", err)
	}
	if err := s.Sync(ctx); err != nil {
		t.Fatalf("a Sync with nothing failed since the previous one: %v", err)
	}
	if n, err := s.PointCount("01W"); err != nil || n != 10 {
		t.Fatalf("after the failed commit: %d points, %v; want 10", n, err)
	}
	if got, _ := s.GetScan("01W"); got.GetState() != glissv1.ScanState_SCAN_STATE_RUNNING {
		t.Fatalf("failed PutScan changed the record: state %v", got.GetState())
	}

	failing.Store(false)
	// The engine resumes from the stored count.
	if _, err := appendSync(10, 20); err != nil {
		t.Fatal(err)
	}
	if err := s.PutScan(ctx, sc); err != nil {
		t.Fatal(err)
	}
	pts := readAll(t, s, "01W", 0)
	if len(pts) != 20 {
		t.Fatalf("%d points, want 20", len(pts))
	}
	for i, p := range pts {
		if !proto.Equal(p, testPoint("01W", uint64(i))) {
			t.Fatalf("point %d changed", i)
		}
	}
	if err := s.Check(); err != nil {
		t.Fatal(err)
	}
}

// A file that cannot grow (bbolt's MaxSize, standing for a full disk) fails
// the commit in bbolt itself; what was committed stays intact and readable.
func TestFileFull(t *testing.T) {
	const maxSize = 1 << 20
	s, path := openTest(t, Options{MaxBatch: 256, maxSizeBytes: maxSize, Logger: quiet})
	if err := s.CreateScan(ctx, testScan("01M", "full", glissv1.ScanState_SCAN_STATE_RUNNING, t0)); err != nil {
		t.Fatal(err)
	}
	// ~300 bytes a point: 1 MiB holds a few thousand. Append until it fails.
	var stored uint64
	var failure error
	for from := uint64(0); from < 100_000 && failure == nil; from = stored {
		r := newResults()
		for seq := from; seq < from+256; seq++ {
			if err := s.AppendPoint(ctx, testPoint("01M", seq), r.done(seq)); err != nil {
				t.Fatal(err)
			}
		}
		r.wg.Wait()
		for seq := from; seq < from+256; seq++ {
			err, _ := r.get(seq)
			if err == nil {
				if failure != nil {
					t.Fatalf("point %d stored after point %d failed", seq, stored)
				}
				stored = seq + 1
			} else if failure == nil {
				failure = err
			}
		}
	}
	if !errors.Is(failure, berrors.ErrMaxSizeReached) {
		t.Fatalf("first failure %v, want bbolt's max size error", failure)
	}
	if err := s.Sync(ctx); !errors.Is(err, berrors.ErrMaxSizeReached) {
		t.Fatalf("Sync: %v, want the commit error", err)
	}
	if n, err := s.PointCount("01M"); err != nil || n != stored {
		t.Fatalf("PointCount %d, %v; want the %d points whose done succeeded", n, err, stored)
	}
	if err := s.Check(); err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	s2, err := Open(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	pts := readAll(t, s2, "01M", 0)
	if uint64(len(pts)) != stored || stored == 0 {
		t.Fatalf("after reopen: %d points, want %d (> 0)", len(pts), stored)
	}
	for i, p := range pts {
		if !proto.Equal(p, testPoint("01M", uint64(i))) {
			t.Fatalf("point %d changed", i)
		}
	}
	if err := s2.Check(); err != nil {
		t.Fatal(err)
	}
}

// A second Open of the same file fails after LockTimeout, naming the file
// and the likely cause, instead of waiting for ever.
func TestLockTimeout(t *testing.T) {
	_, path := openTest(t, Options{})
	const timeout = 300 * time.Millisecond
	type result struct {
		s   *Store
		err error
		in  time.Duration
	}
	res := make(chan result, 1)
	go func() {
		start := time.Now()
		s, err := Open(path, Options{LockTimeout: timeout})
		res <- result{s, err, time.Since(start)}
	}()
	select {
	case r := <-res:
		if r.err == nil {
			r.s.Close()
			t.Fatal("second Open of a locked file succeeded")
		}
		if !errors.Is(r.err, berrors.ErrTimeout) || !strings.Contains(r.err.Error(), path) || !strings.Contains(r.err.Error(), "locked by another process?") {
			t.Fatalf("error %q: want bbolt's timeout, the path and the likely cause", r.err)
		}
		// bbolt retries every 50 ms and gives up once the next retry would
		// pass the timeout (bbolt v1.5.0 bolt_unix.go, flock).
		if r.in < timeout-50*time.Millisecond {
			t.Fatalf("gave up after %v, before the %v lock timeout", r.in, timeout)
		}
	case <-time.After(30 * time.Second): // a hang, not a slow machine
		t.Fatal("second Open still waiting after 30 s: the lock timeout is not applied")
	}
}

// Damage written behind the store's back is found by Check and reported by
// readers with the scan id and seq.
func TestCorruptRecords(t *testing.T) {
	s, path := openTest(t, Options{})
	if err := s.CreateScan(ctx, testScan("01K", "damaged", glissv1.ScanState_SCAN_STATE_RUNNING, t0)); err != nil {
		t.Fatal(err)
	}
	appendRange(t, s, "01K", 0, 10)
	if err := s.CreateScan(ctx, testScan("01L", "record damaged", glissv1.ScanState_SCAN_STATE_QUEUED, t0)); err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	db, err := bolt.Open(path, 0o600, &bolt.Options{Timeout: time.Second})
	if err != nil {
		t.Fatal(err)
	}
	var k [8]byte
	err = db.Update(func(tx *bolt.Tx) error {
		pb := tx.Bucket(bucketPoints).Bucket([]byte("01K"))
		if err := pb.Put(putSeqKey(k[:], 3), []byte{0xff, 0xff, 0xff}); err != nil { // not protobuf
			return err
		}
		other, _ := marshalOpts.Marshal(testPoint("01K", 4))
		if err := pb.Put(putSeqKey(k[:], 6), other); err != nil { // the record of another seq
			return err
		}
		if err := pb.Delete(putSeqKey(k[:], 8)); err != nil { // a gap
			return err
		}
		return tx.Bucket(bucketScans).Put([]byte("01L"), []byte("\x12\x05trunc")) // a cut record
	})
	if err != nil {
		t.Fatal(err)
	}
	db.Close()

	s2, err := Open(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	err = s2.Check()
	for _, want := range []string{`scan "01K": point 3: corrupt record`, `scan "01K": point 6: corrupt record: holds scan "01K" point 4`, `point 9 follows 8 points`, `scan "01L": corrupt record`} {
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("Check: %v\nwant a problem %q", err, want)
		}
	}
	err = s2.ReadPoints(ctx, "01K", 0, func(*glissv1.Point) error { return nil })
	if err == nil || !strings.Contains(err.Error(), `scan "01K": point 3: corrupt record`) {
		t.Fatalf("ReadPoints over a corrupt point: %v", err)
	}
	if _, err := s2.GetScan("01L"); err == nil || !strings.Contains(err.Error(), `scan "01L": corrupt record`) {
		t.Fatalf("GetScan of a corrupt record: %v", err)
	}
	if _, _, err := s2.ListScans(ListFilter{}); err == nil || !strings.Contains(err.Error(), `scan "01L": corrupt record`) {
		t.Fatalf("ListScans over a corrupt record: %v", err)
	}
}
