package store

import (
	"context"
	"fmt"
	"unicode/utf8"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	bolt "go.etcd.io/bbolt"
	"google.golang.org/protobuf/proto"
)

// opCalibration stores one calibration version (scanID: the bench name,
// seq: the version, data: the record).
const opCalibration = opCheck + 1

// MaxCalibrationBytes bounds one stored calibration record.
const MaxCalibrationBytes = 1 << 20

func checkBenchName(name string) error {
	if name == "" || len(name) > MaxScanIDBytes || !utf8.ValidString(name) {
		return fmt.Errorf("bench name %.40q: want 1 … %d bytes of UTF-8: %w", name, MaxScanIDBytes, ErrInvalid)
	}
	return nil
}

// PutCalibration stores rec as version rec.Version of bench rec.Bench;
// durable when it returns nil. Versions count from 1 without gaps: a
// version other than the next one (1 + the newest stored) is ErrSequence,
// and nothing is stored. Version 0 (the bench's nominal set) is never
// stored.
func (s *Store) PutCalibration(ctx context.Context, rec *glissv1.CalibrationRecord) error {
	if err := checkBenchName(rec.GetBench()); err != nil {
		return fmt.Errorf("store: put calibration: %w", err)
	}
	if rec.GetVersion() < 1 {
		return fmt.Errorf("store: put calibration: bench %q: version %d, want ≥ 1 (0 is the nominal set, not stored): %w", rec.GetBench(), rec.GetVersion(), ErrInvalid)
	}
	data, err := marshalOpts.Marshal(rec)
	if err != nil {
		return fmt.Errorf("store: put calibration: encode: %w", err)
	}
	if len(data) > MaxCalibrationBytes {
		return fmt.Errorf("store: put calibration: bench %q version %d: %d bytes, allowed ≤ %d: %w", rec.GetBench(), rec.GetVersion(), len(data), MaxCalibrationBytes, ErrInvalid)
	}
	if err := s.call(ctx, op{kind: opCalibration, scanID: rec.GetBench(), seq: uint64(rec.GetVersion()), data: data}); err != nil {
		return fmt.Errorf("store: put calibration: %w", err)
	}
	return nil
}

// putCalibration runs on the writer.
func (w *writeTx) putCalibration(o *op, i int) (opErr, fatal error) {
	top := w.tx.Bucket(bucketCalibrations)
	if top == nil {
		return nil, fmt.Errorf("bucket %s missing", bucketCalibrations)
	}
	b, err := top.CreateBucketIfNotExists([]byte(o.scanID))
	if err != nil {
		return nil, fmt.Errorf("calibrations of bench %q: %w", o.scanID, err)
	}
	next := uint64(1)
	if k, _ := b.Cursor().Last(); k != nil {
		last, err := decodeSeqKey(k)
		if err != nil {
			return nil, fmt.Errorf("calibrations of bench %q: %w", o.scanID, err)
		}
		next = last + 1
	}
	if o.seq != next {
		return fmt.Errorf("calibration of bench %q: version %d, expected %d: %w", o.scanID, o.seq, next, ErrSequence), nil
	}
	if err := b.Put(putSeqKey(w.keys[8*i:], o.seq), o.data); err != nil {
		return nil, fmt.Errorf("calibration of bench %q version %d: %w", o.scanID, o.seq, err)
	}
	return nil, nil
}

// ListCalibrations returns every stored version of bench, newest first
// (none: an empty list).
func (s *Store) ListCalibrations(bench string) ([]*glissv1.CalibrationRecord, error) {
	if err := checkBenchName(bench); err != nil {
		return nil, fmt.Errorf("store: list calibrations: %w", err)
	}
	var out []*glissv1.CalibrationRecord
	err := s.view(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketCalibrations).Bucket([]byte(bench))
		if b == nil {
			return nil
		}
		c := b.Cursor()
		for k, v := c.Last(); k != nil; k, v = c.Prev() {
			rec, err := decodeCalibration(bench, k, v)
			if err != nil {
				return err
			}
			out = append(out, rec)
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("store: list calibrations: %w", err)
	}
	return out, nil
}

// GetCalibration returns one stored version of bench, or ErrNotFound.
// version 0 (latest) returns the newest stored version.
func (s *Store) GetCalibration(bench string, version uint32) (*glissv1.CalibrationRecord, error) {
	if err := checkBenchName(bench); err != nil {
		return nil, fmt.Errorf("store: get calibration: %w", err)
	}
	var out *glissv1.CalibrationRecord
	err := s.view(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketCalibrations).Bucket([]byte(bench))
		if b == nil {
			return nil
		}
		var k, v []byte
		if version == 0 {
			k, v = b.Cursor().Last()
		} else {
			var key [8]byte
			k = putSeqKey(key[:], uint64(version))
			if v = b.Get(k); v == nil {
				k = nil
			}
		}
		if k == nil {
			return nil
		}
		rec, err := decodeCalibration(bench, k, v)
		out = rec
		return err
	})
	if err != nil {
		return nil, fmt.Errorf("store: get calibration: %w", err)
	}
	if out == nil {
		what := fmt.Sprintf("version %d", version)
		if version == 0 {
			what = "any stored version"
		}
		return nil, fmt.Errorf("store: calibration of bench %q, %s: %w", bench, what, ErrNotFound)
	}
	return out, nil
}

func decodeCalibration(bench string, k, v []byte) (*glissv1.CalibrationRecord, error) {
	ver, err := decodeSeqKey(k)
	if err != nil {
		return nil, fmt.Errorf("calibration of bench %q: %w", bench, err)
	}
	rec := &glissv1.CalibrationRecord{}
	if err := proto.Unmarshal(v, rec); err != nil {
		return nil, fmt.Errorf("calibration of bench %q version %d: corrupt record (%d bytes): %w", bench, ver, len(v), err)
	}
	if rec.GetBench() != bench || uint64(rec.GetVersion()) != ver {
		return nil, fmt.Errorf("calibration of bench %q version %d: record says bench %q version %d", bench, ver, rec.GetBench(), rec.GetVersion())
	}
	return rec, nil
}
