// Package store owns glissd's database: every scan record, every measured
// point and the audit log, kept in one bbolt file. It is the only code that
// knows the file layout and the bucket names (see layout.go).
//
// All writes go through one ordered queue drained by one writer goroutine,
// which commits them in groups: up to Options.MaxBatch items per bbolt
// transaction, i.e. per fsync. Reads use short read transactions of their own.
//
// # Why group commit loses nothing a watcher has seen
//
// A point is handed to AppendPoint, queued, and later written by the writer in
// a transaction together with the points queued around it. Its done callback
// runs only after that transaction's Commit has returned, and bbolt's Commit
// returns only after the data pages and then the meta page are written and
// fdatasync'ed (NoSync is never set, DB.Batch is never used). The engine tells
// a watcher of a point only from that callback. So a watcher can only have
// seen points that are already on disk. A crash (SIGKILL, power loss) at any
// moment loses at most the points whose done was never called: the
// transaction in flight is either entirely on disk (its meta page made it) or
// entirely absent (bbolt opens from the previous valid meta page). Points are
// accepted only in seq order without gaps, so what survives is always the
// prefix 0 … n-1 of a scan, and a resume restarts from the stored count n.
package store

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"sync"
	"sync/atomic"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	bolt "go.etcd.io/bbolt"
	berrors "go.etcd.io/bbolt/errors"
	"google.golang.org/protobuf/proto"
)

// Errors callers may test for with errors.Is.
var (
	// ErrNotFound: no scan with that id.
	ErrNotFound = errors.New("not found")
	// ErrExists: a scan with that id is already stored.
	ErrExists = errors.New("already exists")
	// ErrSequence: a point whose seq is not the next one expected for its
	// scan (a duplicate or a gap). Nothing is written for it.
	ErrSequence = errors.New("point out of sequence")
	// ErrClosed: the store is closed.
	ErrClosed = errors.New("store closed")
	// ErrInvalid: a request the store refuses to store (missing id, bad page
	// size or page token); the message names the field and the allowed range.
	ErrInvalid = errors.New("invalid argument")
)

// Options tune a Store. The zero value is fine.
type Options struct {
	// Timeout for the file lock; a second glissd on the same data dir must
	// fail clearly, not hang. 0: 2 s.
	LockTimeout time.Duration
	// MaxBatch caps the items (points, record updates) per commit. 0: 4096.
	MaxBatch int
	// MaxDelay is how long the writer may wait to gather more items before
	// committing. 0: commit as soon as the queue is drained (no added latency).
	MaxDelay time.Duration
	// Logger receives failed commits. nil: slog.Default().
	Logger *slog.Logger

	// beforeCommit, when set, runs inside each write transaction after the
	// items are applied; an error from it aborts (rolls back) the
	// transaction exactly as a failed commit would. Test seam for write
	// faults.
	beforeCommit func() error
	// maxSizeBytes caps the file size (bbolt's MaxSize); growing beyond it
	// fails the commit like a full disk. Test seam; 0: no cap.
	maxSizeBytes int
}

const (
	defaultLockTimeout = 2 * time.Second
	defaultMaxBatch    = 4096
	initialMmapBytes   = 1 << 30
	// MaxBatchLimit bounds Options.MaxBatch (the queue holds 2 × MaxBatch items).
	MaxBatchLimit = 1 << 16
	// MaxScanIDBytes bounds scan ids (they are bbolt keys and bucket names).
	MaxScanIDBytes = 128
)

var marshalOpts = proto.MarshalOptions{Deterministic: true}

// Done receives the outcome of an appended point: nil once the transaction
// that holds it has committed, or why nothing of it is stored.
type Done = func(p *glissv1.Point, err error)

// Store is glissd's database. Its methods are safe for concurrent use.
type Store struct {
	path string
	db   *bolt.DB
	opts Options

	// mu guards closed and the sends on queue: senders hold it for reading
	// while they send, Close takes it for writing to close the queue.
	mu      sync.RWMutex
	closed  bool
	queue   chan op
	stopped chan struct{}

	// Owned by the writer goroutine.
	errSinceSync error
	keyBuf       []byte
	opErrs       []error

	arena pointArena // encoded points, written by AppendPoint's callers

	commits        atomic.Uint64 // write transactions committed
	committedItems atomic.Uint64 // items in them
	commitTimes    [CommitBuckets]atomic.Uint64
}

// Open opens (creating if needed) the database file at path and its
// buckets, and starts the writer. The parent directory must exist.
func Open(path string, o Options) (*Store, error) {
	switch {
	case o.LockTimeout < 0:
		return nil, fmt.Errorf("store: open %s: LockTimeout %v, want ≥ 0 (0: %v): %w", path, o.LockTimeout, defaultLockTimeout, ErrInvalid)
	case o.MaxBatch < 0 || o.MaxBatch > MaxBatchLimit:
		return nil, fmt.Errorf("store: open %s: MaxBatch %d, allowed 0 … %d (0: %d): %w", path, o.MaxBatch, MaxBatchLimit, defaultMaxBatch, ErrInvalid)
	case o.MaxDelay < 0:
		return nil, fmt.Errorf("store: open %s: MaxDelay %v, want ≥ 0: %w", path, o.MaxDelay, ErrInvalid)
	}
	if o.LockTimeout == 0 {
		o.LockTimeout = defaultLockTimeout
	}
	if o.MaxBatch == 0 {
		o.MaxBatch = defaultMaxBatch
	}
	if o.Logger == nil {
		o.Logger = slog.Default()
	}
	_, statErr := os.Stat(path)
	created := errors.Is(statErr, fs.ErrNotExist)
	db, err := bolt.Open(path, 0o600, &bolt.Options{
		Timeout: o.LockTimeout,
		MaxSize: o.maxSizeBytes,
		// Address space, not memory: pages count as resident only when
		// touched. Without it bbolt remaps the file each time it outgrows
		// the map (doubling from 32 KiB), and a remap waits for every open
		// read transaction (a long export) while the writer holds points,
		// and copies every key and value of the open transaction. The file
		// then grows in bbolt's 16 MiB steps from the start (a new store is
		// a 16 MiB sparse file holding a few hundred KiB). Not on Windows,
		// where bbolt grows the file to the size of the map.
		InitialMmapSize: initialMmapSize(),
	})
	if err != nil {
		if errors.Is(err, berrors.ErrTimeout) {
			return nil, fmt.Errorf("store: open %s: file lock not obtained within %s (locked by another process? is another glissd using this data directory?): %w",
				path, o.LockTimeout, err)
		}
		return nil, fmt.Errorf("store: open %s: %w", path, err)
	}
	if err := db.Update(initLayout); err != nil {
		_ = db.Close()
		return nil, fmt.Errorf("store: open %s: %w", path, err)
	}
	if created {
		// bbolt fsyncs the file, not the directory entry of a new file: without
		// this a power cut could lose the whole new file, commits and all.
		if err := syncDir(filepath.Dir(path)); err != nil {
			_ = db.Close()
			return nil, fmt.Errorf("store: open %s: %w", path, err)
		}
	}
	s := &Store{
		path:    path,
		db:      db,
		opts:    o,
		queue:   make(chan op, 2*o.MaxBatch),
		stopped: make(chan struct{}),
	}
	go s.run()
	return s, nil
}

// initialMmapSize is the map bbolt starts with (Options.InitialMmapSize):
// bbolt's default (0) on Windows and where 1 GiB of address space is dear
// (32-bit).
func initialMmapSize() int {
	if runtime.GOOS == "windows" || strconv.IntSize == 32 {
		return 0
	}
	return initialMmapBytes
}

func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return fmt.Errorf("sync directory: %w", err)
	}
	defer d.Close()
	if err := d.Sync(); err != nil {
		return fmt.Errorf("sync directory %s: %w", dir, err)
	}
	return nil
}

// Path is the database file's path.
func (s *Store) Path() string { return s.path }

// Close stops accepting requests, lets the writer commit everything already
// accepted (their callbacks run), then closes the file. Later calls return
// ErrClosed.
func (s *Store) Close() error {
	s.mu.Lock()
	if s.closed {
		s.mu.Unlock()
		return ErrClosed
	}
	s.closed = true
	close(s.queue)
	s.mu.Unlock()
	<-s.stopped
	if err := s.db.Close(); err != nil {
		return fmt.Errorf("store %s: close: %w", s.path, err)
	}
	return nil
}

type opKind uint8

const (
	opPoint opKind = iota
	opCreateScan
	opPutScan
	opAudit
	opSync
	opCheck
)

// op is one queued request. Points come encoded (data, in the store's
// arena) with their message, which goes back to their done callback.
type op struct {
	kind   opKind
	scanID string
	seq    uint64
	data   []byte
	point  *glissv1.Point // opPoint: the point data encodes
	scan   *glissv1.Scan
	done   Done       // points
	reply  chan error // everything else; buffered (1)
}

// submit queues o, blocking while the queue is full, honouring ctx.
func (s *Store) submit(ctx context.Context, o op) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	s.mu.RLock()
	defer s.mu.RUnlock()
	if s.closed {
		return ErrClosed
	}
	select {
	case s.queue <- o:
		return nil
	default:
	}
	select {
	case s.queue <- o:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}

// call queues o and waits for its result.
func (s *Store) call(ctx context.Context, o op) error {
	reply := make(chan error, 1)
	o.reply = reply
	if err := s.submit(ctx, o); err != nil {
		return err
	}
	select {
	case err := <-reply:
		return err
	case <-ctx.Done():
		return fmt.Errorf("%w (the request stays queued and may still be committed)", ctx.Err())
	}
}

// run is the writer goroutine: it alone writes to the database.
func (s *Store) run() {
	defer close(s.stopped)
	batch := make([]op, 0, s.opts.MaxBatch)
	// A barrier (check) read while gathering, run after the commit. A value,
	// not a pointer to the loop's op: that would move every op to the heap.
	var pending op
	hasPending := false
	var timer *time.Timer
	for {
		var first op
		if hasPending {
			first, pending, hasPending = pending, op{}, false
		} else {
			var ok bool
			if first, ok = <-s.queue; !ok {
				return
			}
		}
		if first.kind == opCheck {
			first.reply <- s.check()
			continue
		}
		batch = append(batch[:0], first)
		open := true
		// A caller waiting on its reply (record update, audit, Sync) ends the
		// gathering: MaxDelay is latency accepted for points only.
		flush := first.reply != nil
		var deadline <-chan time.Time
	gather:
		for !flush && len(batch) < s.opts.MaxBatch {
			var o op
			var ok bool
			select {
			case o, ok = <-s.queue:
			default:
				if s.opts.MaxDelay == 0 {
					break gather
				}
				if deadline == nil {
					if timer == nil {
						timer = time.NewTimer(s.opts.MaxDelay)
					} else {
						timer.Reset(s.opts.MaxDelay)
					}
					deadline = timer.C
				}
				select {
				case o, ok = <-s.queue:
				case <-deadline:
					deadline = nil
					break gather
				}
			}
			if !ok {
				open = false
				break
			}
			if o.kind == opCheck {
				pending, hasPending = o, true
				break
			}
			batch = append(batch, o)
			flush = o.reply != nil
		}
		if deadline != nil {
			timer.Stop() // Go ≥ 1.23: a later Reset cannot deliver a stale tick
		}
		s.commit(batch)
		clear(batch) // drop references to records and callbacks
		if !open {
			return
		}
	}
}

// commit writes batch in one transaction and then reports every item's
// outcome in queue order.
func (s *Store) commit(batch []op) {
	errs := s.opErrs[:0]
	for range batch {
		errs = append(errs, nil)
	}
	s.opErrs = errs
	writes := 0
	for i := range batch {
		if batch[i].kind != opSync {
			writes++
		}
	}
	var err error
	if writes > 0 {
		if need := 8 * len(batch); cap(s.keyBuf) < need {
			s.keyBuf = make([]byte, need)
		}
		began := time.Now()
		err = s.db.Update(func(tx *bolt.Tx) error {
			w, err := newWriteTx(tx, s.keyBuf[:8*len(batch)])
			if err != nil {
				return err
			}
			for i := range batch {
				opErr, fatal := w.apply(&batch[i], i)
				if fatal != nil {
					return fatal
				}
				errs[i] = opErr
			}
			if s.opts.beforeCommit != nil {
				if err := s.opts.beforeCommit(); err != nil {
					return err
				}
			}
			return nil
		})
		if err != nil {
			err = fmt.Errorf("store %s: commit of %d items: %w", s.path, writes, err)
			s.opts.Logger.Error("store: write transaction failed; its items are not stored", "path", s.path, "items", writes, "err", err)
			if s.errSinceSync == nil {
				s.errSinceSync = err
			}
		} else {
			s.commitTimes[commitBucket(time.Since(began))].Add(1)
			s.commits.Add(1)
			s.committedItems.Add(uint64(writes))
		}
	}
	for i := range batch {
		o := &batch[i]
		e := errs[i]
		if e == nil {
			e = err
		}
		switch o.kind {
		case opPoint:
			if o.done != nil {
				o.done(o.point, e)
			}
		case opSync:
			o.reply <- s.errSinceSync
			s.errSinceSync = nil
		default:
			o.reply <- e
		}
	}
	clear(errs)
}

// Sync waits until everything queued before it is durable. It returns the
// first write (commit) error since the previous Sync, if any; errors of
// single items (ErrSequence, ErrExists …) go to those items' callers only.
func (s *Store) Sync(ctx context.Context) error {
	return s.call(ctx, op{kind: opSync})
}

// readable reports ErrClosed once Close has begun.
func (s *Store) readable() error {
	s.mu.RLock()
	defer s.mu.RUnlock()
	if s.closed {
		return ErrClosed
	}
	return nil
}

// view runs fn in a read transaction, mapping a closed database to ErrClosed.
func (s *Store) view(fn func(tx *bolt.Tx) error) error {
	if err := s.readable(); err != nil {
		return err
	}
	err := s.db.View(fn)
	if errors.Is(err, berrors.ErrDatabaseNotOpen) {
		return ErrClosed
	}
	return err
}

// Stats are the writer's counters since Open.
type Stats struct {
	// Commits is the number of write transactions committed (one fsync each).
	Commits uint64
	// Items is the number of items (points, record updates, audit entries)
	// in those transactions.
	Items uint64
	// CommitTimes counts the committed transactions by how long bbolt's
	// Update took (writing the pages, two fdatasyncs): bucket i holds those
	// that took at most CommitBucketBound(i), the last one the rest. The
	// time includes applying the items (CPU, for big batches). It
	// tells a slow disk from a slow daemon.
	CommitTimes [CommitBuckets]uint64
}

// CommitBuckets is the number of commit-time buckets: bounds from 62.5 µs
// doubling to 4.096 s, and one for longer.
const CommitBuckets = 18

// CommitBucketBound is the upper bound of commit-time bucket i (the last
// bucket has none: math.MaxInt64).
func CommitBucketBound(i int) time.Duration {
	if i >= CommitBuckets-1 {
		return math.MaxInt64
	}
	return 62500 * time.Nanosecond << i
}

func commitBucket(d time.Duration) int {
	for i := range CommitBuckets - 1 {
		if d <= CommitBucketBound(i) {
			return i
		}
	}
	return CommitBuckets - 1
}

// Sub is what happened between an earlier snapshot e and s.
func (s Stats) Sub(e Stats) Stats {
	d := Stats{Commits: s.Commits - e.Commits, Items: s.Items - e.Items}
	for i := range d.CommitTimes {
		d.CommitTimes[i] = s.CommitTimes[i] - e.CommitTimes[i]
	}
	return d
}

// CommitTimeQuantile is the bound of the bucket that holds quantile q
// (0 < q ≤ 1) of the commit times: at most a factor 2 above the true value.
// 0 when there were no commits.
func (s Stats) CommitTimeQuantile(q float64) time.Duration {
	var n uint64
	for _, c := range s.CommitTimes {
		n += c
	}
	if n == 0 {
		return 0
	}
	rank := uint64(math.Ceil(q * float64(n)))
	var seen uint64
	for i, c := range s.CommitTimes {
		if seen += c; seen >= rank {
			return CommitBucketBound(i)
		}
	}
	return CommitBucketBound(CommitBuckets - 1)
}

// Stats returns the writer's counters. They are read one after the other,
// so while the writer runs they may straddle one commit.
func (s *Store) Stats() Stats {
	st := Stats{Commits: s.commits.Load(), Items: s.committedItems.Load()}
	for i := range st.CommitTimes {
		st.CommitTimes[i] = s.commitTimes[i].Load()
	}
	return st
}
