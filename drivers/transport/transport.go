// Package transport carries the ASCII line traffic between gliss's drivers
// and real instruments: serial ports (go.bug.st/serial), raw TCP sockets
// (5025 is the usual SCPI port), and a replay of recorded traffic. One
// framing layer serves all of them: a command is written with its write
// terminator, and the reply is read until the read terminator, with a
// deadline, never blocking forever.
//
// A Link owns one physical connection and serialises whole transactions
// with one mutex, so several instruments can share a port (the axes of a
// multi-axis controller). When the connection fails it is closed and opened
// again at the next transaction (a USB adapter that vanished and came back).
package transport

import (
	"context"
	"errors"
	"time"
)

// Tx is one transaction: a command and, when Reply is set, one reply line.
type Tx struct {
	// Instrument names the instrument on whose behalf the transaction runs
	// (for recordings and errors).
	Instrument string
	// Send is the command without its terminator.
	Send string
	// Reply says whether one reply line is expected.
	Reply bool
	// Timeout bounds the wait for the reply line (0: the link's default).
	Timeout time.Duration
}

// Exchanger runs transactions. Link, Replay and Recorded implement it.
type Exchanger interface {
	// Exchange sends tx.Send and, if tx.Reply, returns the reply line
	// without its terminator.
	Exchange(ctx context.Context, tx Tx) (string, error)
	// Close releases the connection; it is safe to call twice.
	Close() error
}

// Errors of the transport. They are wrapped with the instrument and the
// command; test them with errors.Is.
var (
	// ErrTimeout: no complete reply line before the deadline.
	ErrTimeout = errors.New("no reply before the deadline")
	// ErrClosed: the link was closed.
	ErrClosed = errors.New("link closed")
	// ErrLineTooLong: more bytes than MaxLineBytes without a terminator.
	ErrLineTooLong = errors.New("reply line too long")
)

// Stream is a raw byte connection with timed reads: the device side of a
// Link. ReadTimeout returns (0, nil) when nothing arrived within d; that is
// "nothing yet", not end of file.
type Stream interface {
	ReadTimeout(p []byte, d time.Duration) (int, error)
	Write(p []byte) (int, error)
	// Drain discards input that is already waiting.
	Drain() error
	Close() error
}

// Opener opens (or re-opens) a stream.
type Opener func(ctx context.Context) (Stream, error)
