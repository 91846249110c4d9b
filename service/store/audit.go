package store

import (
	"context"
	"encoding/base64"
	"encoding/binary"
	"encoding/json"
	"fmt"
	"time"

	bolt "go.etcd.io/bbolt"
)

var backgroundCtx = context.Background()

// AuditEntry is one line of the audit log: who did what to which target,
// and how it ended.
type AuditEntry struct {
	At      time.Time `json:"at"`
	Who     string    `json:"who"`
	Method  string    `json:"method"`
	Target  string    `json:"target"`
	Outcome string    `json:"outcome"`
}

// AuditFilter pages ListAudit.
type AuditFilter struct {
	// PageSize: 1 … MaxPageSize; 0 means DefaultPageSize.
	PageSize int
	// PageToken: from a previous call's next token; empty for the first page.
	PageToken string
}

// maxAuditFieldBytes bounds each text field of an audit entry.
const maxAuditFieldBytes = 4096

// AppendAudit stores an audit entry; durable when it returns nil. Entries
// keep the order in which they were queued, together with the points and
// records around them.
func (s *Store) AppendAudit(ctx context.Context, e AuditEntry) error {
	for _, f := range []struct{ name, v string }{{"who", e.Who}, {"method", e.Method}, {"target", e.Target}, {"outcome", e.Outcome}} {
		if len(f.v) > maxAuditFieldBytes {
			return fmt.Errorf("store: audit: %s: %d bytes, allowed 0 … %d: %w", f.name, len(f.v), maxAuditFieldBytes, ErrInvalid)
		}
	}
	data, err := json.Marshal(e)
	if err != nil {
		return fmt.Errorf("store: audit: encode: %w", err)
	}
	if err := s.call(ctx, op{kind: opAudit, data: data}); err != nil {
		return fmt.Errorf("store: audit: %w", err)
	}
	return nil
}

// ListAudit returns audit entries newest first, one page, and the token of
// the next page ("" on the last page).
func (s *Store) ListAudit(f AuditFilter) ([]AuditEntry, string, error) {
	size := f.PageSize
	switch {
	case size == 0:
		size = DefaultPageSize
	case size < 0 || size > MaxPageSize:
		return nil, "", fmt.Errorf("store: list audit: page_size %d, allowed 0 … %d: %w", f.PageSize, MaxPageSize, ErrInvalid)
	}
	var before uint64
	if f.PageToken != "" {
		var err error
		if before, err = decodeAuditToken(f.PageToken); err != nil {
			return nil, "", fmt.Errorf("store: list audit: %w", err)
		}
	}
	var out []AuditEntry
	var next string
	err := s.view(func(tx *bolt.Tx) error {
		c := tx.Bucket(bucketAudit).Cursor()
		var k, v []byte
		if f.PageToken == "" {
			k, v = c.Last()
		} else {
			var key [8]byte
			if k, v = c.Seek(putSeqKey(key[:], before)); k == nil {
				k, v = c.Last()
			} else {
				k, v = c.Prev()
			}
		}
		for ; k != nil; k, v = c.Prev() {
			if len(out) == size {
				seq, err := decodeSeqKey(k)
				if err != nil {
					return fmt.Errorf("audit: %w", err)
				}
				next = encodeAuditToken(seq + 1)
				return nil
			}
			e, err := decodeAudit(k, v)
			if err != nil {
				return err
			}
			out = append(out, e)
		}
		return nil
	})
	if err != nil {
		return nil, "", fmt.Errorf("store: list audit: %w", err)
	}
	return out, next, nil
}

// decodeAudit decodes a stored audit entry.
func decodeAudit(k, v []byte) (AuditEntry, error) {
	var e AuditEntry
	seq, err := decodeSeqKey(k)
	if err != nil {
		return e, fmt.Errorf("audit: %w", err)
	}
	if err := json.Unmarshal(v, &e); err != nil {
		return AuditEntry{}, fmt.Errorf("audit entry %d: corrupt record (%d bytes): %w", seq, len(v), err)
	}
	return e, nil
}

const auditTokenVersion = 2

// encodeAuditToken: the next page holds entries with sequence < before.
func encodeAuditToken(before uint64) string {
	var b [9]byte
	b[0] = auditTokenVersion
	binary.BigEndian.PutUint64(b[1:], before)
	return base64.RawURLEncoding.EncodeToString(b[:])
}

func decodeAuditToken(tok string) (uint64, error) {
	b, err := base64.RawURLEncoding.DecodeString(tok)
	if err != nil || len(b) != 9 || b[0] != auditTokenVersion {
		return 0, fmt.Errorf("page_token %.60q: not a token from a previous audit listing: %w", tok, ErrInvalid)
	}
	return binary.BigEndian.Uint64(b[1:]), nil
}
