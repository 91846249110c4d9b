package store

import (
	"bytes"
	"encoding/base64"
	"encoding/binary"
	"fmt"
	"unicode/utf8"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	bolt "go.etcd.io/bbolt"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// File layout (version 1). Only this package knows it.
//
//	meta           "layout" → "1"
//	scans          scan id → glissv1.Scan (deterministic protobuf)
//	scans.created  created-at key (12 bytes) ‖ scan id → empty; the listing order
//	points         scan id → nested bucket: seq (8 bytes big-endian) → glissv1.Point
//	audit          sequence (8 bytes big-endian) → AuditEntry (JSON)
//	calibrations   bench name → nested bucket: version (8 bytes big-endian) → glissv1.CalibrationRecord
//
// The created-at key is the record's created_at seconds with the sign bit
// flipped (so negative times sort first) followed by its nanoseconds, both
// big-endian: byte order equals time order.
var (
	bucketMeta      = []byte("meta")
	bucketScans     = []byte("scans")
	bucketByCreated = []byte("scans.created")
	bucketPoints    = []byte("points")
	bucketAudit     = []byte("audit")
	// bucketCalibrations is created on open, also in a file written before it existed.
	bucketCalibrations = []byte("calibrations")

	keyLayout     = []byte("layout")
	layoutVersion = []byte("1")
)

const createdKeyLen = 12

func initLayout(tx *bolt.Tx) error {
	meta, err := tx.CreateBucketIfNotExists(bucketMeta)
	if err != nil {
		return fmt.Errorf("bucket %s: %w", bucketMeta, err)
	}
	if v := meta.Get(keyLayout); v == nil {
		if err := meta.Put(keyLayout, layoutVersion); err != nil {
			return fmt.Errorf("layout version: %w", err)
		}
	} else if !bytes.Equal(v, layoutVersion) {
		return fmt.Errorf("file layout version %q, this glissd reads version %q only", v, layoutVersion)
	}
	for _, name := range [][]byte{bucketScans, bucketByCreated, bucketPoints, bucketAudit, bucketCalibrations} {
		if _, err := tx.CreateBucketIfNotExists(name); err != nil {
			return fmt.Errorf("bucket %s: %w", name, err)
		}
	}
	return nil
}

// checkScanID validates a scan id before it becomes a key.
func checkScanID(id string) error {
	if id == "" {
		return fmt.Errorf("scan id: empty, want 1 … %d bytes: %w", MaxScanIDBytes, ErrInvalid)
	}
	if len(id) > MaxScanIDBytes {
		return fmt.Errorf("scan id %.40q…: %d bytes, want 1 … %d: %w", id, len(id), MaxScanIDBytes, ErrInvalid)
	}
	if !utf8.ValidString(id) {
		return fmt.Errorf("scan id %q: not valid UTF-8: %w", id, ErrInvalid)
	}
	return nil
}

func putSeqKey(dst []byte, seq uint64) []byte {
	binary.BigEndian.PutUint64(dst[:8], seq)
	return dst[:8]
}

func decodeSeqKey(k []byte) (uint64, error) {
	if len(k) != 8 {
		return 0, fmt.Errorf("point key %x: %d bytes, want 8", k, len(k))
	}
	return binary.BigEndian.Uint64(k), nil
}

// createdKey is the listing key of a scan record.
func createdKey(sc *glissv1.Scan) []byte {
	ts := sc.GetCreatedAt()
	k := make([]byte, createdKeyLen, createdKeyLen+len(sc.GetId()))
	binary.BigEndian.PutUint64(k[0:8], uint64(ts.GetSeconds())^(1<<63))
	binary.BigEndian.PutUint32(k[8:12], uint32(ts.GetNanos()))
	return append(k, sc.GetId()...)
}

// decodeCreatedKey splits a listing key into the creation time and the id.
func decodeCreatedKey(k []byte) (*timestamppb.Timestamp, string, error) {
	if len(k) <= createdKeyLen || len(k) > createdKeyLen+MaxScanIDBytes {
		return nil, "", fmt.Errorf("listing key %x: %d bytes, want %d … %d", k, len(k), createdKeyLen+1, createdKeyLen+MaxScanIDBytes)
	}
	sec := int64(binary.BigEndian.Uint64(k[0:8]) ^ (1 << 63))
	nanos := binary.BigEndian.Uint32(k[8:12])
	if nanos > 999_999_999 {
		return nil, "", fmt.Errorf("listing key %x: nanoseconds %d, want 0 … 999999999", k, nanos)
	}
	id := string(k[createdKeyLen:])
	if err := checkScanID(id); err != nil {
		return nil, "", fmt.Errorf("listing key %x: %w", k, err)
	}
	return &timestamppb.Timestamp{Seconds: sec, Nanos: int32(nanos)}, id, nil
}

const pageTokenVersion = 1

// encodePageToken makes the opaque token that resumes a listing after key.
func encodePageToken(key []byte) string {
	b := make([]byte, 0, 1+len(key))
	b = append(b, pageTokenVersion)
	b = append(b, key...)
	return base64.RawURLEncoding.EncodeToString(b)
}

// decodePageToken parses a token from a client. It returns the listing key
// the next page starts strictly before.
func decodePageToken(tok string) ([]byte, error) {
	if len(tok) > 4*(1+createdKeyLen+MaxScanIDBytes) {
		return nil, fmt.Errorf("page_token: %d characters, longer than any token this store issues: %w", len(tok), ErrInvalid)
	}
	b, err := base64.RawURLEncoding.DecodeString(tok)
	if err != nil {
		return nil, fmt.Errorf("page_token %q: not a token from a previous listing (%v): %w", tok, err, ErrInvalid)
	}
	if len(b) == 0 || b[0] != pageTokenVersion {
		return nil, fmt.Errorf("page_token %q: unknown token version: %w", tok, ErrInvalid)
	}
	key := b[1:]
	if _, _, err := decodeCreatedKey(key); err != nil {
		return nil, fmt.Errorf("page_token %q: %v: %w", tok, err, ErrInvalid)
	}
	return key, nil
}

// decodeScan decodes a stored scan record, checking it belongs under key id.
func decodeScan(id string, b []byte) (*glissv1.Scan, error) {
	sc := new(glissv1.Scan)
	if err := proto.Unmarshal(b, sc); err != nil {
		return nil, fmt.Errorf("scan %q: corrupt record (%d bytes): %w", id, len(b), err)
	}
	if sc.GetId() != id {
		return nil, fmt.Errorf("scan %q: corrupt record: holds id %q", id, sc.GetId())
	}
	return sc, nil
}

// decodePoint decodes a stored point, checking it belongs to scan id at seq.
func decodePoint(id string, seq uint64, b []byte) (*glissv1.Point, error) {
	p := new(glissv1.Point)
	if err := proto.Unmarshal(b, p); err != nil {
		return nil, fmt.Errorf("scan %q: point %d: corrupt record (%d bytes): %w", id, seq, len(b), err)
	}
	if p.GetScanId() != id || p.GetSeq() != seq {
		return nil, fmt.Errorf("scan %q: point %d: corrupt record: holds scan %q point %d", id, seq, p.GetScanId(), p.GetSeq())
	}
	return p, nil
}

// storedCount is the number of points in a scan's point bucket. Points are
// stored without gaps from 0, so it is the last key plus one.
func storedCount(pb *bolt.Bucket) (uint64, error) {
	k, _ := pb.Cursor().Last()
	if k == nil {
		return 0, nil
	}
	seq, err := decodeSeqKey(k)
	if err != nil {
		return 0, err
	}
	return seq + 1, nil
}

// writeTx applies queued items inside one write transaction.
type writeTx struct {
	tx                       *bolt.Tx
	scans, byCreated, points *bolt.Bucket
	audit                    *bolt.Bucket
	keys                     []byte               // 8 bytes per batch item, alive for the transaction
	next                     map[string]*seqState // per scan touched by this transaction
}

type seqState struct {
	b    *bolt.Bucket
	next uint64
}

func newWriteTx(tx *bolt.Tx, keys []byte) (*writeTx, error) {
	w := &writeTx{tx: tx, keys: keys, next: make(map[string]*seqState)}
	for _, nb := range []struct {
		dst  **bolt.Bucket
		name []byte
	}{{&w.scans, bucketScans}, {&w.byCreated, bucketByCreated}, {&w.points, bucketPoints}, {&w.audit, bucketAudit}} {
		if *nb.dst = tx.Bucket(nb.name); *nb.dst == nil {
			return nil, fmt.Errorf("bucket %s missing", nb.name)
		}
	}
	return w, nil
}

// seqOf returns the point bucket of scan id and the next seq it expects.
func (w *writeTx) seqOf(id string) (*seqState, error) {
	if st := w.next[id]; st != nil {
		return st, nil
	}
	pb := w.points.Bucket([]byte(id))
	if pb == nil {
		return nil, fmt.Errorf("scan %q: %w", id, ErrNotFound)
	}
	n, err := storedCount(pb)
	if err != nil {
		return nil, fmt.Errorf("scan %q: %w", id, err)
	}
	// Keys only ever grow: pack pages fully instead of bbolt's half-full split.
	pb.FillPercent = 0.95
	st := &seqState{b: pb, next: n}
	w.next[id] = st
	return st, nil
}

// apply writes one item. opErr is the item's own failure (nothing written for
// it); fatal aborts the whole transaction.
func (w *writeTx) apply(o *op, i int) (opErr, fatal error) {
	switch o.kind {
	case opPoint:
		st, err := w.seqOf(o.scanID)
		if err != nil {
			return err, nil
		}
		if o.seq != st.next {
			return fmt.Errorf("scan %q: point seq %d, expected %d: %w", o.scanID, o.seq, st.next, ErrSequence), nil
		}
		if err := st.b.Put(putSeqKey(w.keys[8*i:], o.seq), o.data); err != nil {
			return nil, fmt.Errorf("scan %q: point %d: %w", o.scanID, o.seq, err)
		}
		st.next++
		return nil, nil
	case opCreateScan:
		return w.createScan(o.scan)
	case opPutScan:
		return w.putScan(o.scan)
	case opAudit:
		seq, err := w.audit.NextSequence()
		if err != nil {
			return nil, fmt.Errorf("audit: %w", err)
		}
		if err := w.audit.Put(putSeqKey(w.keys[8*i:], seq), o.data); err != nil {
			return nil, fmt.Errorf("audit: %w", err)
		}
		return nil, nil
	case opCalibration:
		return w.putCalibration(o, i)
	case opSync:
		return nil, nil
	}
	return nil, fmt.Errorf("unknown queued item kind %d", o.kind)
}

func (w *writeTx) createScan(sc *glissv1.Scan) (opErr, fatal error) {
	id := []byte(sc.GetId())
	if w.scans.Get(id) != nil {
		return fmt.Errorf("scan %q: %w", sc.GetId(), ErrExists), nil
	}
	if w.points.Bucket(id) != nil {
		return nil, fmt.Errorf("scan %q: point bucket exists without a record", sc.GetId())
	}
	sc.PointsStored = 0
	b, err := marshalOpts.Marshal(sc)
	if err != nil {
		return fmt.Errorf("scan %q: encode record: %w", sc.GetId(), err), nil
	}
	if err := w.scans.Put(id, b); err != nil {
		return nil, fmt.Errorf("scan %q: %w", sc.GetId(), err)
	}
	if err := w.byCreated.Put(createdKey(sc), nil); err != nil {
		return nil, fmt.Errorf("scan %q: listing key: %w", sc.GetId(), err)
	}
	if _, err := w.points.CreateBucket(id); err != nil {
		return nil, fmt.Errorf("scan %q: point bucket: %w", sc.GetId(), err)
	}
	return nil, nil
}

func (w *writeTx) putScan(sc *glissv1.Scan) (opErr, fatal error) {
	id := []byte(sc.GetId())
	old := w.scans.Get(id)
	if old == nil {
		return fmt.Errorf("scan %q: %w", sc.GetId(), ErrNotFound), nil
	}
	prev, err := decodeScan(sc.GetId(), old)
	if err != nil {
		return err, nil
	}
	st, err := w.seqOf(sc.GetId())
	if err != nil {
		return nil, err // record without point bucket: the file is inconsistent
	}
	sc.PointsStored = st.next
	b, err := marshalOpts.Marshal(sc)
	if err != nil {
		return fmt.Errorf("scan %q: encode record: %w", sc.GetId(), err), nil
	}
	if err := w.scans.Put(id, b); err != nil {
		return nil, fmt.Errorf("scan %q: %w", sc.GetId(), err)
	}
	oldKey, newKey := createdKey(prev), createdKey(sc)
	if !bytes.Equal(oldKey, newKey) {
		if err := w.byCreated.Delete(oldKey); err != nil {
			return nil, fmt.Errorf("scan %q: listing key: %w", sc.GetId(), err)
		}
		if err := w.byCreated.Put(newKey, nil); err != nil {
			return nil, fmt.Errorf("scan %q: listing key: %w", sc.GetId(), err)
		}
	}
	return nil, nil
}
