package transport

import (
	"context"
	"fmt"
	"strings"
	"time"

	"go.bug.st/serial"
)

// Serial is the configuration of a serial port.
type Serial struct {
	// Port is the device path; prefer the stable /dev/serial/by-id/… names,
	// which survive a USB adapter that comes back under another ttyUSBn.
	Port     string
	Baud     int     // 9600 when zero
	DataBits int     // 8 when zero
	Parity   string  // none (default), odd, even, mark, space
	StopBits float64 // 1 (default), 1.5 or 2
}

// Mode checks the configuration and converts it to go.bug.st/serial's.
func (c Serial) Mode() (*serial.Mode, error) {
	m := &serial.Mode{BaudRate: c.Baud, DataBits: c.DataBits}
	if m.BaudRate == 0 {
		m.BaudRate = 9600
	}
	if m.BaudRate < 50 || m.BaudRate > 4000000 {
		return nil, fmt.Errorf("baud %d outside [50, 4000000]", c.Baud)
	}
	if m.DataBits == 0 {
		m.DataBits = 8
	}
	if m.DataBits < 5 || m.DataBits > 8 {
		return nil, fmt.Errorf("data_bits %d outside [5, 8]", c.DataBits)
	}
	switch strings.ToLower(c.Parity) {
	case "", "none", "n":
		m.Parity = serial.NoParity
	case "odd", "o":
		m.Parity = serial.OddParity
	case "even", "e":
		m.Parity = serial.EvenParity
	case "mark", "m":
		m.Parity = serial.MarkParity
	case "space", "s":
		m.Parity = serial.SpaceParity
	default:
		return nil, fmt.Errorf("parity %q: want none, odd, even, mark or space", c.Parity)
	}
	switch c.StopBits {
	case 0, 1:
		m.StopBits = serial.OneStopBit
	case 1.5:
		m.StopBits = serial.OnePointFiveStopBits
	case 2:
		m.StopBits = serial.TwoStopBits
	default:
		return nil, fmt.Errorf("stop_bits %g: want 1, 1.5 or 2", c.StopBits)
	}
	return m, nil
}

// SerialOpener opens the serial port c at each call.
func SerialOpener(c Serial) (Opener, error) {
	mode, err := c.Mode()
	if err != nil {
		return nil, err
	}
	if c.Port == "" {
		return nil, fmt.Errorf("serial port path is empty")
	}
	return func(ctx context.Context) (Stream, error) {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		p, err := serial.Open(c.Port, mode)
		if err != nil {
			return nil, err
		}
		return &serialStream{p: p, timeout: -2}, nil
	}, nil
}

type serialStream struct {
	p       serial.Port
	timeout time.Duration
}

func (s *serialStream) ReadTimeout(b []byte, d time.Duration) (int, error) {
	if d < 0 {
		d = 0
	}
	if d != s.timeout {
		if err := s.p.SetReadTimeout(d); err != nil {
			return 0, err
		}
		s.timeout = d
	}
	return s.p.Read(b)
}

func (s *serialStream) Write(b []byte) (int, error) { return s.p.Write(b) }

func (s *serialStream) Drain() error {
	// tcflush on the input side; bytes still in the adapter's FIFO may
	// arrive afterwards, which the reply matching tolerates.
	return s.p.ResetInputBuffer()
}

func (s *serialStream) Close() error { return s.p.Close() }
