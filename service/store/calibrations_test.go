package store

import (
	"context"
	"errors"
	"sync"
	"testing"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"
)

func calRec(bench string, v uint32) *glissv1.CalibrationRecord {
	return &glissv1.CalibrationRecord{Bench: bench, Version: v, CreatedAt: timestamppb.New(t0),
		SetJson: `{"schema":1,"version":1}`, Note: "test"}
}

// TestCalibrationVersions: versions are stored per bench from 1 without
// gaps, listed newest first, survive a reopen, and a duplicate or skipped
// version is refused with ErrSequence.
func TestCalibrationVersions(t *testing.T) {
	s, path := openTest(t, Options{})
	ctx := context.Background()
	if _, err := s.GetCalibration("sim", 0); !errors.Is(err, ErrNotFound) {
		t.Fatalf("latest of an empty bench: %v, want ErrNotFound", err)
	}
	for v := uint32(1); v <= 3; v++ {
		if err := s.PutCalibration(ctx, calRec("sim", v)); err != nil {
			t.Fatalf("put version %d: %v", v, err)
		}
	}
	if err := s.PutCalibration(ctx, calRec("lab2", 1)); err != nil {
		t.Fatal(err)
	}
	for _, v := range []uint32{3, 5} {
		if err := s.PutCalibration(ctx, calRec("sim", v)); !errors.Is(err, ErrSequence) {
			t.Errorf("put version %d after 3: %v, want ErrSequence", v, err)
		}
	}
	if err := s.PutCalibration(ctx, calRec("sim", 0)); !errors.Is(err, ErrInvalid) {
		t.Errorf("put version 0: %v, want ErrInvalid", err)
	}
	if err := s.PutCalibration(ctx, calRec("", 1)); !errors.Is(err, ErrInvalid) {
		t.Errorf("put without bench: %v, want ErrInvalid", err)
	}
	s.Close()
	s2, err := Open(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	list, err := s2.ListCalibrations("sim")
	if err != nil || len(list) != 3 || list[0].Version != 3 || list[2].Version != 1 {
		t.Fatalf("list after reopen: %v, %v", list, err)
	}
	if !proto.Equal(list[1], calRec("sim", 2)) {
		t.Errorf("version 2 read back %v", list[1])
	}
	latest, err := s2.GetCalibration("sim", 0)
	if err != nil || latest.Version != 3 {
		t.Errorf("latest: %v, %v", latest, err)
	}
	if _, err := s2.GetCalibration("sim", 4); !errors.Is(err, ErrNotFound) {
		t.Errorf("version 4: %v, want ErrNotFound", err)
	}
	if l, err := s2.ListCalibrations("lab2"); err != nil || len(l) != 1 {
		t.Errorf("other bench: %v, %v", l, err)
	}
	if err := s2.Check(); err != nil {
		t.Errorf("check: %v", err)
	}
}

// TestCalibrationRace: concurrent puts of the same next version: exactly
// one wins.
func TestCalibrationRace(t *testing.T) {
	s, _ := openTest(t, Options{})
	var wg sync.WaitGroup
	errs := make([]error, 8)
	for i := range errs {
		wg.Add(1)
		go func() { defer wg.Done(); errs[i] = s.PutCalibration(context.Background(), calRec("sim", 1)) }()
	}
	wg.Wait()
	ok := 0
	for _, err := range errs {
		switch {
		case err == nil:
			ok++
		case !errors.Is(err, ErrSequence):
			t.Errorf("put: %v", err)
		}
	}
	if ok != 1 {
		t.Errorf("%d puts of version 1 succeeded, want 1", ok)
	}
}

// FuzzDecodeCalibration: a stored calibration record, however corrupt,
// decodes or is an error; never a panic, never a record of another key.
func FuzzDecodeCalibration(f *testing.F) {
	good, _ := marshalOpts.Marshal(calRec("sim", 2))
	var key [8]byte
	f.Add(putSeqKey(key[:], 2), good)
	f.Add([]byte{1, 2, 3}, good)
	f.Add(putSeqKey(key[:], 2), []byte{0xff, 0x01})
	f.Fuzz(func(t *testing.T, k, v []byte) {
		rec, err := decodeCalibration("sim", k, v)
		if err == nil && (rec.GetBench() != "sim" || len(k) != 8) {
			t.Fatalf("decoded %v from key %x", rec, k)
		}
	})
}
