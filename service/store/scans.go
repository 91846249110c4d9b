package store

import (
	"bytes"
	"context"
	"fmt"
	"slices"
	"strings"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	bolt "go.etcd.io/bbolt"
	"google.golang.org/protobuf/proto"
)

// ListFilter selects and pages ListScans.
type ListFilter struct {
	// PageSize: 1 … MaxPageSize; 0 means DefaultPageSize.
	PageSize int
	// PageToken: from a previous call's next token; empty for the first page.
	PageToken string
	// States: only scans in these states (all when empty).
	States []glissv1.ScanState
	// NameContains: only scans whose spec name contains this text, ignoring case.
	NameContains string
}

// Page sizes of ListScans.
const (
	DefaultPageSize = 50
	MaxPageSize     = 1000
)

// CreateScan stores a new scan record (points_stored is set to 0). It is
// durable when CreateScan returns nil. ErrExists if the id is taken.
func (s *Store) CreateScan(ctx context.Context, sc *glissv1.Scan) error {
	if sc == nil {
		return fmt.Errorf("store: create scan: nil record: %w", ErrInvalid)
	}
	if err := checkScanID(sc.GetId()); err != nil {
		return fmt.Errorf("store: create scan: %w", err)
	}
	if err := s.call(ctx, op{kind: opCreateScan, scanID: sc.GetId(), scan: proto.Clone(sc).(*glissv1.Scan)}); err != nil {
		return fmt.Errorf("store: create scan %q: %w", sc.GetId(), err)
	}
	return nil
}

// PutScan replaces a scan record; durable when it returns nil. The stored
// points_stored is set from the stored points (the store's count is
// authoritative), counting every point queued before this call.
// ErrNotFound if no record has that id.
func (s *Store) PutScan(ctx context.Context, sc *glissv1.Scan) error {
	if sc == nil {
		return fmt.Errorf("store: put scan: nil record: %w", ErrInvalid)
	}
	if err := checkScanID(sc.GetId()); err != nil {
		return fmt.Errorf("store: put scan: %w", err)
	}
	if err := s.call(ctx, op{kind: opPutScan, scanID: sc.GetId(), scan: proto.Clone(sc).(*glissv1.Scan)}); err != nil {
		return fmt.Errorf("store: put scan %q: %w", sc.GetId(), err)
	}
	return nil
}

// GetScan returns the record of scan id with points_stored filled from the
// point bucket.
func (s *Store) GetScan(id string) (*glissv1.Scan, error) {
	var sc *glissv1.Scan
	err := s.view(func(tx *bolt.Tx) error {
		var err error
		sc, err = loadScan(tx, id)
		return err
	})
	if err != nil {
		return nil, fmt.Errorf("store: get scan: %w", err)
	}
	return sc, nil
}

func loadScan(tx *bolt.Tx, id string) (*glissv1.Scan, error) {
	b := tx.Bucket(bucketScans).Get([]byte(id))
	if b == nil {
		return nil, fmt.Errorf("scan %q: %w", id, ErrNotFound)
	}
	sc, err := decodeScan(id, b)
	if err != nil {
		return nil, err
	}
	pb := tx.Bucket(bucketPoints).Bucket([]byte(id))
	if pb == nil {
		return nil, fmt.Errorf("scan %q: point bucket missing", id)
	}
	n, err := storedCount(pb)
	if err != nil {
		return nil, fmt.Errorf("scan %q: %w", id, err)
	}
	sc.PointsStored = n
	return sc, nil
}

// ListScans returns scans newest first (by created_at, then id), at most one
// page, and the token of the next page ("" on the last page).
func (s *Store) ListScans(f ListFilter) ([]*glissv1.Scan, string, error) {
	size := f.PageSize
	switch {
	case size == 0:
		size = DefaultPageSize
	case size < 0 || size > MaxPageSize:
		return nil, "", fmt.Errorf("store: list scans: page_size %d, allowed 0 … %d: %w", f.PageSize, MaxPageSize, ErrInvalid)
	}
	var after []byte
	if f.PageToken != "" {
		var err error
		if after, err = decodePageToken(f.PageToken); err != nil {
			return nil, "", fmt.Errorf("store: list scans: %w", err)
		}
	}
	name := strings.ToLower(f.NameContains)
	match := func(sc *glissv1.Scan) bool {
		if len(f.States) > 0 && !slices.Contains(f.States, sc.GetState()) {
			return false
		}
		return name == "" || strings.Contains(strings.ToLower(sc.GetSpec().GetName()), name)
	}
	var out []*glissv1.Scan
	var next string
	err := s.view(func(tx *bolt.Tx) error {
		c := tx.Bucket(bucketByCreated).Cursor()
		var k []byte
		if after == nil {
			k, _ = c.Last()
		} else if k, _ = c.Seek(after); k == nil {
			k, _ = c.Last() // every key is before the token
		} else {
			k, _ = c.Prev() // Seek gave the first key ≥ token
		}
		var lastKey []byte
		for ; k != nil; k, _ = c.Prev() {
			_, id, err := decodeCreatedKey(k)
			if err != nil {
				return err
			}
			sc, err := loadScan(tx, id)
			if err != nil {
				return err
			}
			if !match(sc) {
				continue
			}
			if len(out) == size {
				// One more match exists: the page is not the last.
				next = encodePageToken(lastKey)
				return nil
			}
			out = append(out, sc)
			lastKey = bytes.Clone(k)
		}
		return nil
	})
	if err != nil {
		return nil, "", fmt.Errorf("store: list scans: %w", err)
	}
	return out, next, nil
}
