package transport

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"sync"
	"time"
)

// Record is one recorded transaction, one JSON object per line of a
// recording file.
type Record struct {
	Time       time.Time `json:"time"`
	Instrument string    `json:"instrument"`
	Sent       string    `json:"sent"`
	Received   string    `json:"received"`
	LatencyMS  float64   `json:"latency_ms"`
	Error      string    `json:"error,omitempty"`
}

// Recorder appends transactions to a JSON-lines file. It is safe for
// concurrent use by every instrument of a bench.
type Recorder struct {
	mu   sync.Mutex
	f    *os.File
	path string
	err  error
}

// NewRecorder creates dir if needed and a new file
// transactions-YYYYMMDDTHHMMSSZ.jsonl in it.
func NewRecorder(dir string) (*Recorder, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("record: %w", err)
	}
	name := "transactions-" + time.Now().UTC().Format("20060102T150405Z") + ".jsonl"
	path := filepath.Join(dir, name)
	f, err := os.OpenFile(path, os.O_CREATE|os.O_WRONLY|os.O_APPEND, 0o644)
	if err != nil {
		return nil, fmt.Errorf("record: %w", err)
	}
	return &Recorder{f: f, path: path}, nil
}

// Path is the recording file.
func (r *Recorder) Path() string { return r.path }

// Write appends one record. The first write error is kept and returned by
// Close; recording never fails a transaction.
func (r *Recorder) Write(rec Record) {
	b, err := json.Marshal(rec)
	if err != nil {
		return
	}
	b = append(b, '\n')
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.f == nil {
		return
	}
	if _, err := r.f.Write(b); err != nil && r.err == nil {
		r.err = err
	}
}

// Close closes the file.
func (r *Recorder) Close() error {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.f == nil {
		return r.err
	}
	err := r.f.Close()
	r.f = nil
	if r.err != nil {
		return r.err
	}
	return err
}

// Recorded wraps an exchanger so that every transaction is written to rec.
func Recorded(ex Exchanger, rec *Recorder) Exchanger {
	if rec == nil {
		return ex
	}
	return &recorded{ex: ex, rec: rec}
}

type recorded struct {
	ex  Exchanger
	rec *Recorder
}

func (r *recorded) Exchange(ctx context.Context, tx Tx) (string, error) {
	t0 := time.Now()
	got, err := r.ex.Exchange(ctx, tx)
	rec := Record{
		Time:       t0.UTC(),
		Instrument: tx.Instrument,
		Sent:       tx.Send,
		Received:   got,
		LatencyMS:  float64(time.Since(t0).Microseconds()) / 1000,
	}
	if err != nil {
		rec.Error = err.Error()
	}
	r.rec.Write(rec)
	return got, err
}

func (r *recorded) Close() error { return r.ex.Close() }
