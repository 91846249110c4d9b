package store

import (
	"errors"
	"fmt"

	bolt "go.etcd.io/bbolt"
)

// maxCheckErrors bounds the errors Check collects from a badly damaged file.
const maxCheckErrors = 1000

// Check runs bbolt's consistency check (page structure, freelist) and the
// store's own invariants: every scan record decodes and has a listing key
// and a point bucket; every listing key names a record with that creation
// time; every scan's points are seq 0 … n-1 without gaps and each decodes as
// the point its key says. It returns every error found, joined (nil if none).
//
// Check goes through the write queue: it runs after everything queued before
// it is committed, with no write in progress (bbolt's check on a read
// transaction must not overlap a writer).
func (s *Store) Check() error {
	reply := make(chan error, 1)
	if err := s.submit(backgroundCtx, op{kind: opCheck, reply: reply}); err != nil {
		return fmt.Errorf("store: check: %w", err)
	}
	return <-reply
}

// check runs on the writer goroutine.
func (s *Store) check() error {
	var errs []error
	add := func(err error) bool {
		errs = append(errs, err)
		return len(errs) < maxCheckErrors
	}
	err := s.db.View(func(tx *bolt.Tx) error {
		full := false
		for err := range tx.Check() { // drained to the end: the checker runs on this tx
			if !full {
				full = !add(fmt.Errorf("bbolt: %w", err))
			}
		}
		if !full {
			checkLayout(tx, add)
		}
		return nil
	})
	if err != nil {
		errs = append(errs, err)
	}
	if len(errs) == 0 {
		return nil
	}
	return fmt.Errorf("store %s: check found %d problem(s): %w", s.path, len(errs), errors.Join(errs...))
}

func checkLayout(tx *bolt.Tx, add func(error) bool) {
	scans, byCreated, points := tx.Bucket(bucketScans), tx.Bucket(bucketByCreated), tx.Bucket(bucketPoints)
	if scans == nil || byCreated == nil || points == nil || tx.Bucket(bucketAudit) == nil || tx.Bucket(bucketMeta) == nil {
		add(errors.New("a bucket of the layout is missing"))
		return
	}
	// Listing keys → records.
	listed := make(map[string]bool)
	c := byCreated.Cursor()
	for k, _ := c.First(); k != nil; k, _ = c.Next() {
		ts, id, err := decodeCreatedKey(k)
		if err != nil {
			if !add(err) {
				return
			}
			continue
		}
		listed[id] = true
		v := scans.Get([]byte(id))
		if v == nil {
			if !add(fmt.Errorf("scan %q: listed but no record", id)) {
				return
			}
			continue
		}
		sc, err := decodeScan(id, v)
		if err != nil {
			if !add(err) {
				return
			}
			continue
		}
		if ct := sc.GetCreatedAt(); ct.GetSeconds() != ts.GetSeconds() || ct.GetNanos() != ts.GetNanos() {
			if !add(fmt.Errorf("scan %q: listed at %v, record created at %v", id, ts.AsTime(), ct.AsTime())) {
				return
			}
		}
	}
	// Records → listing and points.
	c = scans.Cursor()
	for k, _ := c.First(); k != nil; k, _ = c.Next() {
		id := string(k)
		if !listed[id] {
			if !add(fmt.Errorf("scan %q: record not listed", id)) {
				return
			}
		}
		pb := points.Bucket(k)
		if pb == nil {
			if !add(fmt.Errorf("scan %q: point bucket missing", id)) {
				return
			}
			continue
		}
		if !checkPoints(id, pb, add) {
			return
		}
	}
	// Point buckets → records.
	c = points.Cursor()
	for k, v := c.First(); k != nil; k, v = c.Next() {
		if v != nil {
			if !add(fmt.Errorf("points: key %q is not a bucket", k)) {
				return
			}
			continue
		}
		if scans.Get(k) == nil {
			if !add(fmt.Errorf("scan %q: points without a record", k)) {
				return
			}
		}
	}
	// Audit entries decode.
	c = tx.Bucket(bucketAudit).Cursor()
	for k, v := c.First(); k != nil; k, v = c.Next() {
		if _, err := decodeAudit(k, v); err != nil {
			if !add(err) {
				return
			}
		}
	}
}

// checkPoints checks one scan's points are 0 … n-1 and decode. It returns
// false when the error budget is spent.
func checkPoints(id string, pb *bolt.Bucket, add func(error) bool) bool {
	want := uint64(0)
	c := pb.Cursor()
	for k, v := c.First(); k != nil; k, v = c.Next() {
		seq, err := decodeSeqKey(k)
		if err != nil {
			if !add(fmt.Errorf("scan %q: %w", id, err)) {
				return false
			}
			continue
		}
		if seq != want {
			if !add(fmt.Errorf("scan %q: point %d follows %d points: gap or disorder", id, seq, want)) {
				return false
			}
		}
		want = seq + 1
		if v == nil {
			if !add(fmt.Errorf("scan %q: point %d is a bucket", id, seq)) {
				return false
			}
			continue
		}
		if _, err := decodePoint(id, seq, v); err != nil {
			if !add(err) {
				return false
			}
		}
	}
	return true
}
