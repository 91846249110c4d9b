package store

import (
	"bytes"
	"encoding/binary"
	"strings"
	"testing"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"google.golang.org/protobuf/proto"
)

// Stored bytes come back from disk: decoding them must never panic, and a
// record that does not decode (or decodes as another one) is an error that
// names the scan id (and the seq for points).
func FuzzDecodePoint(f *testing.F) {
	good, _ := marshalOpts.Marshal(testPoint("01P", 5))
	f.Add("01P", uint64(5), good)
	f.Add("01P", uint64(6), good)
	f.Add("01P", uint64(5), good[:len(good)/2])
	f.Add("", uint64(0), []byte{})
	f.Add("01P", uint64(1), []byte{0x0a, 0xff, 0xff, 0xff, 0xff, 0x0f})
	f.Fuzz(func(t *testing.T, id string, seq uint64, b []byte) {
		p, err := decodePoint(id, seq, b)
		if err != nil {
			if p != nil {
				t.Fatal("point and error both returned")
			}
			if !strings.Contains(err.Error(), "scan "+quote(id)) || !strings.Contains(err.Error(), "point "+itoa(seq)) {
				t.Fatalf("error %q does not name scan %q point %d", err, id, seq)
			}
			return
		}
		if p.GetScanId() != id || p.GetSeq() != seq {
			t.Fatalf("decoded scan %q point %d under key %q %d", p.GetScanId(), p.GetSeq(), id, seq)
		}
		// What decodes re-encodes to a record that decodes to the same point.
		again, err := marshalOpts.Marshal(p)
		if err != nil {
			t.Fatal(err)
		}
		q, err := decodePoint(id, seq, again)
		if err != nil || !proto.Equal(p, q) {
			t.Fatalf("re-encoded point differs: %v", err)
		}
	})
}

func FuzzDecodeScan(f *testing.F) {
	good, _ := marshalOpts.Marshal(testScan("01S", "rabi", glissv1.ScanState_SCAN_STATE_RUNNING, t0))
	f.Add("01S", good)
	f.Add("01T", good)
	f.Add("01S", good[:len(good)-3])
	f.Add("", []byte{})
	f.Fuzz(func(t *testing.T, id string, b []byte) {
		sc, err := decodeScan(id, b)
		if err != nil {
			if !strings.Contains(err.Error(), "scan "+quote(id)) {
				t.Fatalf("error %q does not name scan %q", err, id)
			}
			return
		}
		if sc.GetId() != id {
			t.Fatalf("decoded id %q under key %q", sc.GetId(), id)
		}
	})
}

// Page tokens come from clients.
func FuzzPageToken(f *testing.F) {
	f.Add(encodePageToken(createdKey(testScan("01S", "", 0, t0))))
	f.Add(encodeAuditToken(17))
	f.Add("")
	f.Add("AQ")
	f.Add("%%%")
	f.Fuzz(func(t *testing.T, tok string) {
		if key, err := decodePageToken(tok); err == nil {
			if _, _, err := decodeCreatedKey(key); err != nil {
				t.Fatalf("accepted token %q holds a bad key: %v", tok, err)
			}
			if encodePageToken(key) != tok {
				// Base64 without padding has one spelling per byte string
				// except for the unused low bits of the last character.
				if k2, err := decodePageToken(encodePageToken(key)); err != nil || !bytes.Equal(k2, key) {
					t.Fatalf("token %q does not round-trip", tok)
				}
			}
		}
		if seq, err := decodeAuditToken(tok); err == nil && encodeAuditToken(seq) != tok {
			if s2, err := decodeAuditToken(encodeAuditToken(seq)); err != nil || s2 != seq {
				t.Fatalf("audit token %q does not round-trip", tok)
			}
		}
	})
}

func FuzzDecodeAudit(f *testing.F) {
	var k [8]byte
	binary.BigEndian.PutUint64(k[:], 3)
	f.Add(k[:], []byte(`{"at":"2026-11-03T21:40:00Z","who":"uid:1000","method":"/gliss.v1.ScanService/CancelScan","target":"01S","outcome":"ok"}`))
	f.Add(k[:], []byte(`{"at":"yesterday"}`))
	f.Add([]byte{1}, []byte(`{}`))
	f.Fuzz(func(t *testing.T, k, v []byte) {
		if _, err := decodeAudit(k, v); err != nil && len(k) == 8 && !strings.Contains(err.Error(), "audit entry "+itoa(binary.BigEndian.Uint64(k))) {
			t.Fatalf("error %q does not name the entry", err)
		}
	})
}
