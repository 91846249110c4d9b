package transport

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
	"sync"
)

// ErrReplay marks a transaction that does not match the recording.
var ErrReplay = errors.New("replay mismatch")

// Replay plays the device side of a recording back: each instrument's
// transactions must come in the recorded order with the recorded commands,
// and get the recorded replies (or errors). Instruments are matched
// independently, so the interleaving of several instruments may differ.
type Replay struct {
	file string
	mu   sync.Mutex
	recs map[string][]replayRec // by instrument, in order
	next map[string]int
}

type replayRec struct {
	Record
	line int
}

// LoadReplay reads a recording file.
func LoadReplay(path string) (*Replay, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("replay: %w", err)
	}
	defer f.Close()
	return ParseReplay(path, f)
}

// ParseReplay reads a recording from r; name is used in errors.
func ParseReplay(name string, r io.Reader) (*Replay, error) {
	rp := &Replay{file: name, recs: map[string][]replayRec{}, next: map[string]int{}}
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 64*1024), 1<<20)
	line := 0
	for sc.Scan() {
		line++
		b := bytes.TrimSpace(sc.Bytes())
		if len(b) == 0 {
			continue
		}
		var rec Record
		dec := json.NewDecoder(bytes.NewReader(b))
		dec.DisallowUnknownFields()
		if err := dec.Decode(&rec); err != nil {
			return nil, fmt.Errorf("%s:%d: %w", name, line, err)
		}
		if dec.More() {
			return nil, fmt.Errorf("%s:%d: more than one JSON value on the line", name, line)
		}
		if rec.Instrument == "" {
			return nil, fmt.Errorf("%s:%d: key instrument: missing", name, line)
		}
		rp.recs[rec.Instrument] = append(rp.recs[rec.Instrument], replayRec{rec, line})
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("%s:%d: %w", name, line+1, err)
	}
	return rp, nil
}

// Remaining is the number of transactions of instrument not yet played.
func (r *Replay) Remaining(instrument string) int {
	r.mu.Lock()
	defer r.mu.Unlock()
	return len(r.recs[instrument]) - r.next[instrument]
}

// Exchange plays the next recorded transaction of tx.Instrument.
func (r *Replay) Exchange(ctx context.Context, tx Tx) (string, error) {
	if err := ctx.Err(); err != nil {
		return "", err
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	i := r.next[tx.Instrument]
	list := r.recs[tx.Instrument]
	if i >= len(list) {
		return "", fmt.Errorf("%s: instrument %q sent %q after the last of its %d recorded transactions: %w",
			r.file, tx.Instrument, tx.Send, len(list), ErrReplay)
	}
	rec := list[i]
	if rec.Sent != tx.Send {
		return "", fmt.Errorf("%s:%d: instrument %q sent %q, the recording has %q: %w",
			r.file, rec.line, tx.Instrument, tx.Send, rec.Sent, ErrReplay)
	}
	r.next[tx.Instrument] = i + 1
	if rec.Error != "" {
		if strings.Contains(rec.Error, ErrTimeout.Error()) {
			return "", fmt.Errorf("replayed: %s: %w", rec.Error, ErrTimeout)
		}
		return "", fmt.Errorf("replayed: %s", rec.Error)
	}
	return rec.Received, nil
}

// Close does nothing; a replay holds no connection.
func (r *Replay) Close() error { return nil }
