package transport

import (
	"bytes"
	"context"
	"fmt"
	"log/slog"
	"time"
)

// Framing is how commands and replies are delimited on a link.
type Framing struct {
	// WriteTerminator ends every command ("\n" when empty).
	WriteTerminator string
	// ReadTerminator ends every reply ("\n" when empty). With "\n", a
	// trailing "\r" is removed as well (devices that end lines with CR LF).
	ReadTerminator string
	// Timeout is the default wait for a reply line (1 s when zero).
	Timeout time.Duration
	// MaxLineBytes bounds one reply line (4096 when zero).
	MaxLineBytes int
	// Quiet is how long the line must stay silent, after a transaction that
	// gave up (timeout, partial line), before the next command is sent, so
	// that a late reply is discarded instead of being taken for the next
	// one (100 ms when zero; at most 10 × Quiet is spent waiting).
	Quiet time.Duration
}

func (f Framing) withDefaults() Framing {
	if f.WriteTerminator == "" {
		f.WriteTerminator = "\n"
	}
	if f.ReadTerminator == "" {
		f.ReadTerminator = "\n"
	}
	if f.Timeout <= 0 {
		f.Timeout = time.Second
	}
	if f.MaxLineBytes <= 0 {
		f.MaxLineBytes = 4096
	}
	if f.Quiet <= 0 {
		f.Quiet = 100 * time.Millisecond
	}
	return f
}

// pollSlice is the longest single blocking read, so that a cancelled
// context is noticed within it.
const pollSlice = 50 * time.Millisecond

// Link is one physical connection with framing. Its transactions are
// serialised: a command and its reply are never interleaved with another
// instrument's on the same port.
type Link struct {
	name string
	open Opener
	f    Framing
	log  *slog.Logger

	sem     chan struct{} // one token: the right to run a transaction
	s       Stream        // nil when not connected
	pending []byte
	closed  bool
	dirty   bool // the last transaction gave up: a late reply may follow
	buf     []byte
}

// NewLink makes a link that opens its stream with open at the first
// transaction, and again after a failure. name (a port path, host:port) is
// used in errors and logs.
func NewLink(name string, open Opener, f Framing, log *slog.Logger) *Link {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	l := &Link{name: name, open: open, f: f.withDefaults(), log: log, sem: make(chan struct{}, 1)}
	l.buf = make([]byte, 512)
	return l
}

// Name is the link's port path or address.
func (l *Link) Name() string { return l.name }

// Framing returns the link's framing, defaults filled in.
func (l *Link) Framing() Framing { return l.f }

func (l *Link) lock(ctx context.Context) error {
	select {
	case l.sem <- struct{}{}:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}

func (l *Link) unlock() { <-l.sem }

// Exchange runs one transaction.
func (l *Link) Exchange(ctx context.Context, tx Tx) (string, error) {
	if err := l.lock(ctx); err != nil {
		return "", fmt.Errorf("%s: wait for the port: %w", l.name, err)
	}
	defer l.unlock()
	if l.closed {
		return "", fmt.Errorf("%s: %w", l.name, ErrClosed)
	}
	if l.s == nil {
		s, err := l.open(ctx)
		if err != nil {
			return "", fmt.Errorf("%s: open: %w", l.name, err)
		}
		l.s = s
		l.pending = l.pending[:0]
		l.log.Info("link connected", "port", l.name)
	}
	// Whatever is waiting belongs to an earlier transaction that gave up
	// (a late or garbled reply): it must not be taken for this reply.
	l.pending = l.pending[:0]
	if err := l.s.Drain(); err != nil {
		l.drop(err)
		return "", fmt.Errorf("%s: drain input: %w", l.name, err)
	}
	if l.dirty {
		if err := l.waitQuiet(ctx); err != nil {
			return "", fmt.Errorf("%s: wait for a quiet line: %w", l.name, err)
		}
	}
	msg := make([]byte, 0, len(tx.Send)+len(l.f.WriteTerminator))
	msg = append(append(msg, tx.Send...), l.f.WriteTerminator...)
	if err := writeAll(l.s, msg); err != nil {
		l.drop(err)
		return "", fmt.Errorf("%s: write %q: %w", l.name, tx.Send, err)
	}
	if !tx.Reply {
		return "", nil
	}
	timeout := tx.Timeout
	if timeout <= 0 {
		timeout = l.f.Timeout
	}
	line, err := l.readLine(ctx, time.Now().Add(timeout))
	if err != nil {
		l.dirty = true
		return "", fmt.Errorf("%s: reply to %q: %w", l.name, tx.Send, err)
	}
	if len(l.pending) > 0 {
		// More than one line came back: something is out of step.
		l.dirty = true
	}
	return line, nil
}

// waitQuiet discards input until the line has been silent for Quiet.
func (l *Link) waitQuiet(ctx context.Context) error {
	for i := 0; i < 10; i++ {
		quietUntil := time.Now().Add(l.f.Quiet)
		got := false
		for !got {
			if err := ctx.Err(); err != nil {
				return err
			}
			left := time.Until(quietUntil)
			if left <= 0 {
				l.dirty = false
				return nil
			}
			n, err := l.s.ReadTimeout(l.buf, min(left, pollSlice))
			if err != nil {
				l.drop(err)
				return err
			}
			if n > 0 {
				l.log.Debug("discarded late input", "port", l.name, "bytes", n)
				got = true
			}
		}
	}
	l.dirty = false // a chattering line: give up waiting, the reply patterns decide
	return nil
}

func writeAll(s Stream, p []byte) error {
	for len(p) > 0 {
		n, err := s.Write(p)
		if err != nil {
			return err
		}
		if n == 0 {
			return fmt.Errorf("wrote 0 bytes")
		}
		p = p[n:]
	}
	return nil
}

func (l *Link) readLine(ctx context.Context, deadline time.Time) (string, error) {
	term := []byte(l.f.ReadTerminator)
	for {
		if i := bytes.Index(l.pending, term); i >= 0 {
			line := l.pending[:i]
			if l.f.ReadTerminator == "\n" {
				line = bytes.TrimSuffix(line, []byte("\r"))
			}
			out := string(line)
			l.pending = append(l.pending[:0], l.pending[i+len(term):]...)
			return out, nil
		}
		if len(l.pending) > l.f.MaxLineBytes {
			n := len(l.pending)
			l.pending = l.pending[:0]
			return "", fmt.Errorf("%w: %d bytes without terminator %q", ErrLineTooLong, n, l.f.ReadTerminator)
		}
		if err := ctx.Err(); err != nil {
			return "", err
		}
		left := time.Until(deadline)
		if left <= 0 {
			partial := l.pending
			l.pending = l.pending[:0]
			if len(partial) > 0 {
				return "", fmt.Errorf("%w (partial line %q)", ErrTimeout, clip(partial))
			}
			return "", ErrTimeout
		}
		n, err := l.s.ReadTimeout(l.buf, min(left, pollSlice))
		if n > 0 {
			l.pending = append(l.pending, l.buf[:n]...)
		}
		if err != nil {
			l.drop(err)
			return "", err
		}
	}
}

func clip(b []byte) string {
	if len(b) > 64 {
		return string(b[:64]) + "…"
	}
	return string(b)
}

// drop closes a failed stream; the next transaction opens it again.
func (l *Link) drop(cause error) {
	if l.s != nil {
		l.log.Warn("link lost; will reconnect", "port", l.name, "err", cause)
		_ = l.s.Close()
		l.s = nil
	}
	l.pending = l.pending[:0]
	l.dirty = false
}

// Close closes the link. A transaction in progress finishes first (its
// reads are bounded by their deadline).
func (l *Link) Close() error {
	l.sem <- struct{}{}
	defer l.unlock()
	if l.closed {
		return nil
	}
	l.closed = true
	if l.s != nil {
		err := l.s.Close()
		l.s = nil
		return err
	}
	return nil
}
