package store

import (
	"context"
	"fmt"
	"math"
	"sync"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	bolt "go.etcd.io/bbolt"
)

// readChunk is how many points ReadPoints decodes per read transaction.
const readChunk = 512

// AppendPoint queues a point and returns at once, unless the queue is full:
// then it blocks (bounded memory) until there is room or ctx ends.
//
// When AppendPoint returns nil, done (if not nil) is called exactly once,
// from the writer goroutine, after the transaction holding the point is
// committed and fsynced (err nil) or has failed (err set; nothing of the point
// is stored). Only from that callback may anyone be told of the point. done
// must not block: it holds up the writer; and it must not call the store's
// write methods (AppendPoint, CreateScan, PutScan, Sync, AppendAudit, Check),
// which wait for the writer it runs on. Reads are fine.
//
// Points of one scan must arrive in seq order starting at the stored count;
// a duplicate or gap gets ErrSequence, a point of an unknown scan ErrNotFound.
// After a failed commit the points queued behind it get ErrSequence too (the
// failed ones are missing): the caller resumes from PointCount.
//
// done gets p back, so that one function can serve every point of a scan
// (no closure per point).
//
// When AppendPoint returns an error (invalid point, ctx ended, ErrClosed),
// done is never called.
//
// The point is encoded here, on the caller's goroutine, into the store's
// arena (see pointArena): when points come fast the writer, which commits
// and fsyncs, is the busier of the two, so it should have nothing to do but
// write. The record stored is p as it is when AppendPoint is called. A point
// that cannot be encoded is refused here (ErrInvalid); nothing of it is
// queued.
func (s *Store) AppendPoint(ctx context.Context, p *glissv1.Point, done Done) error {
	if p == nil {
		return fmt.Errorf("store: append point: nil point: %w", ErrInvalid)
	}
	if err := checkScanID(p.GetScanId()); err != nil {
		return fmt.Errorf("store: append point %d: %w", p.GetSeq(), err)
	}
	data, err := s.arena.encode(p)
	if err != nil {
		return fmt.Errorf("store: scan %q: point %d: encode: %v: %w", p.GetScanId(), p.GetSeq(), err, ErrInvalid)
	}
	if err := s.submit(ctx, op{kind: opPoint, scanID: p.GetScanId(), seq: p.GetSeq(), data: data, point: p, done: done}); err != nil {
		return fmt.Errorf("store: scan %q: append point %d: %w", p.GetScanId(), p.GetSeq(), err)
	}
	return nil
}

// pointArena holds encoded points on their way to the writer. Producers
// append to the current chunk under mu and take a sub-slice; a chunk that
// fills up is dropped (left to the garbage collector once the last op that
// refers into it is committed), never reused, so a queued or committing
// point's bytes are never overwritten. bbolt keeps a value slice only until
// its transaction ends, and only reads it. One allocation per chunk, not
// per point.
type pointArena struct {
	mu  sync.Mutex
	buf []byte
}

const (
	arenaChunkBytes = 64 << 10
	// arenaRoomBytes: a chunk with less room left is replaced before
	// encoding (a point is ~150–300 bytes; a bigger one still fits, by
	// append moving it to a new array).
	arenaRoomBytes = 2 << 10
)

// encode appends p's protobuf encoding (the bytes proto.Marshal writes,
// deterministic) to the arena and returns them.
func (a *pointArena) encode(p *glissv1.Point) ([]byte, error) {
	a.mu.Lock()
	defer a.mu.Unlock()
	if cap(a.buf)-len(a.buf) < arenaRoomBytes {
		a.buf = make([]byte, 0, arenaChunkBytes)
	}
	start := len(a.buf)
	buf, ok := appendPointWire(a.buf, p)
	if !ok {
		var err error
		if buf, err = marshalOpts.MarshalAppend(a.buf, p); err != nil {
			return nil, err // a.buf unchanged: at most its spare capacity was written
		}
	}
	a.buf = buf
	return buf[start:len(buf):len(buf)], nil
}

// PointCount is the number of durable points of scan id (points are stored
// without gaps, so they are seq 0 … count-1).
func (s *Store) PointCount(id string) (uint64, error) {
	var n uint64
	err := s.view(func(tx *bolt.Tx) error {
		pb := tx.Bucket(bucketPoints).Bucket([]byte(id))
		if pb == nil {
			return fmt.Errorf("scan %q: %w", id, ErrNotFound)
		}
		var err error
		if n, err = storedCount(pb); err != nil {
			return fmt.Errorf("scan %q: %w", id, err)
		}
		return nil
	})
	if err != nil {
		return 0, fmt.Errorf("store: point count: %w", err)
	}
	return n, nil
}

// ReadPoints calls fn for each stored point of scan id with seq ≥ from, in
// seq order. It reads in chunks of short read transactions, so a long export
// never holds a transaction open (which would stall the writer's remapping)
// and never holds the whole scan in memory. fn runs outside any transaction;
// an error from fn stops the read and is returned as is. Points committed
// while the read goes on are included if they are reached.
func (s *Store) ReadPoints(ctx context.Context, id string, from uint64, fn func(*glissv1.Point) error) error {
	chunk := make([]*glissv1.Point, 0, readChunk)
	var key [8]byte
	for {
		if err := ctx.Err(); err != nil {
			return fmt.Errorf("store: read points of scan %q from %d: %w", id, from, err)
		}
		chunk = chunk[:0]
		err := s.view(func(tx *bolt.Tx) error {
			pb := tx.Bucket(bucketPoints).Bucket([]byte(id))
			if pb == nil {
				return fmt.Errorf("scan %q: %w", id, ErrNotFound)
			}
			c := pb.Cursor()
			for k, v := c.Seek(putSeqKey(key[:], from)); k != nil && len(chunk) < readChunk; k, v = c.Next() {
				seq, err := decodeSeqKey(k)
				if err != nil {
					return fmt.Errorf("scan %q: %w", id, err)
				}
				p, err := decodePoint(id, seq, v)
				if err != nil {
					return err
				}
				chunk = append(chunk, p)
			}
			return nil
		})
		if err != nil {
			return fmt.Errorf("store: read points: %w", err)
		}
		n := len(chunk)
		if n == 0 {
			return nil
		}
		last := chunk[n-1].GetSeq()
		for i, p := range chunk {
			if err := fn(p); err != nil {
				return err
			}
			chunk[i] = nil // let the point go once fn is done with it
		}
		if n < readChunk || last == math.MaxUint64 {
			return nil
		}
		from = last + 1
	}
}
