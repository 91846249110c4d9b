package transport

import (
	"context"
	"errors"
	"net"
	"os"
	"time"
)

// SCPIPort is the usual raw-socket port of SCPI instruments (common
// practice, no published source).
const SCPIPort = "5025"

// TCPOpener dials addr ("host:port"; a bare host gets port 5025) at each call.
func TCPOpener(addr string) Opener {
	if _, _, err := net.SplitHostPort(addr); err != nil {
		addr = net.JoinHostPort(addr, SCPIPort)
	}
	return func(ctx context.Context) (Stream, error) {
		var d net.Dialer
		c, err := d.DialContext(ctx, "tcp", addr)
		if err != nil {
			return nil, err
		}
		return &tcpStream{c: c}, nil
	}
}

type tcpStream struct{ c net.Conn }

func (s *tcpStream) ReadTimeout(b []byte, d time.Duration) (int, error) {
	if err := s.c.SetReadDeadline(time.Now().Add(d)); err != nil {
		return 0, err
	}
	n, err := s.c.Read(b)
	if err != nil && errors.Is(err, os.ErrDeadlineExceeded) {
		return n, nil
	}
	return n, err
}

func (s *tcpStream) Write(b []byte) (int, error) {
	if err := s.c.SetWriteDeadline(time.Now().Add(5 * time.Second)); err != nil {
		return 0, err
	}
	return s.c.Write(b)
}

func (s *tcpStream) Drain() error {
	var b [512]byte
	for {
		n, err := s.ReadTimeout(b[:], time.Microsecond)
		if err != nil {
			return err
		}
		if n == 0 {
			return nil
		}
	}
}

func (s *tcpStream) Close() error { return s.c.Close() }
