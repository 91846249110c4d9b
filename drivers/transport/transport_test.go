package transport

import (
	"bufio"
	"context"
	"errors"
	"net"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/creack/pty"
)

// echoDevice answers each line on the pty master with reply(line).
func ptyDevice(t *testing.T, reply func(line string) (string, bool)) (path string, master *os.File) {
	t.Helper()
	m, s, err := pty.Open()
	if err != nil {
		t.Skipf("no pseudo-terminals here: %v", err)
	}
	path = s.Name()
	// The slave stays open here too: with no slave open, reads on the
	// master fail with EIO (Linux), which would end the device early.
	t.Cleanup(func() { s.Close() })
	go func() {
		r := bufio.NewReader(m)
		for {
			line, err := r.ReadString('\n')
			if err != nil {
				return
			}
			if out, ok := reply(strings.TrimRight(line, "\r\n")); ok {
				if _, err := m.WriteString(out); err != nil {
					return
				}
			}
		}
	}()
	t.Cleanup(func() { m.Close() })
	return path, m
}

func TestSerialLinkOverPTY(t *testing.T) {
	path, _ := ptyDevice(t, func(line string) (string, bool) {
		switch line {
		case "POS?":
			return "POS 12.5\r\n", true
		case "SPLIT?": // the reply arrives in two pieces
			return "PA", true
		case "SILENT?":
			return "", false
		case "SLOW?": // answers after the client gave up
			time.Sleep(80 * time.Millisecond)
			return "LATE 1\n", true
		}
		return "ERR unknown\n", true
	})
	op, err := SerialOpener(Serial{Port: path, Baud: 115200})
	if err != nil {
		t.Fatal(err)
	}
	l := NewLink(path, op, Framing{Timeout: 200 * time.Millisecond}, nil)
	defer l.Close()
	ctx := context.Background()
	got, err := l.Exchange(ctx, Tx{Instrument: "stage", Send: "POS?", Reply: true})
	if err != nil || got != "POS 12.5" {
		t.Fatalf("POS? = %q, %v; want \"POS 12.5\" (CR LF stripped)", got, err)
	}
	_, err = l.Exchange(ctx, Tx{Send: "SPLIT?", Reply: true})
	if !errors.Is(err, ErrTimeout) || !strings.Contains(err.Error(), `partial line "PA"`) {
		t.Fatalf("partial line: err = %v; want a timeout naming the partial line", err)
	}
	_, err = l.Exchange(ctx, Tx{Send: "SILENT?", Reply: true, Timeout: 30 * time.Millisecond})
	if !errors.Is(err, ErrTimeout) {
		t.Fatalf("silent device: err = %v; want ErrTimeout", err)
	}
	// The link still works after the timeouts: stale input was discarded.
	got, err = l.Exchange(ctx, Tx{Send: "POS?", Reply: true})
	if err != nil || got != "POS 12.5" {
		t.Fatalf("after timeouts POS? = %q, %v", got, err)
	}
	// A late reply is discarded, not taken for the next command's.
	if _, err := l.Exchange(ctx, Tx{Send: "SLOW?", Reply: true, Timeout: 30 * time.Millisecond}); !errors.Is(err, ErrTimeout) {
		t.Fatalf("slow device: %v; want ErrTimeout", err)
	}
	got, err = l.Exchange(ctx, Tx{Send: "POS?", Reply: true})
	if err != nil || got != "POS 12.5" {
		t.Fatalf("after a late reply POS? = %q, %v; want \"POS 12.5\"", got, err)
	}
	// A cancelled context ends the wait long before the timeout.
	cctx, cancel := context.WithTimeout(ctx, 20*time.Millisecond)
	defer cancel()
	t0 := time.Now()
	_, err = l.Exchange(cctx, Tx{Send: "SILENT?", Reply: true, Timeout: 5 * time.Second})
	if !errors.Is(err, context.DeadlineExceeded) || time.Since(t0) > 2*time.Second {
		t.Fatalf("cancelled exchange: err = %v after %v", err, time.Since(t0))
	}
}

func TestLinkReconnectsAfterVanish(t *testing.T) {
	dir := t.TempDir()
	link := filepath.Join(dir, "stage")
	var slave *os.File
	serve := func() *os.File {
		m, s, err := pty.Open()
		if err != nil {
			t.Skipf("no pseudo-terminals here: %v", err)
		}
		os.Remove(link)
		if err := os.Symlink(s.Name(), link); err != nil {
			t.Fatal(err)
		}
		slave = s // kept open while the port exists (see ptyDevice)
		go func() {
			r := bufio.NewReader(m)
			for {
				if _, err := r.ReadString('\n'); err != nil {
					return
				}
				m.WriteString("OK\n")
			}
		}()
		return m
	}
	m := serve()
	op, _ := SerialOpener(Serial{Port: link, Baud: 9600})
	l := NewLink(link, op, Framing{Timeout: 100 * time.Millisecond}, nil)
	defer l.Close()
	ctx := context.Background()
	if got, err := l.Exchange(ctx, Tx{Send: "A", Reply: true}); err != nil || got != "OK" {
		t.Fatalf("first exchange: %q, %v", got, err)
	}
	m.Close() // the port vanishes
	slave.Close()
	os.Remove(link)
	if _, err := l.Exchange(ctx, Tx{Send: "B", Reply: true}); err == nil {
		t.Fatal("exchange on a vanished port succeeded")
	}
	if _, err := l.Exchange(ctx, Tx{Send: "B", Reply: true}); err == nil {
		t.Fatal("exchange while the port is gone succeeded")
	}
	m = serve() // it comes back under the same stable name
	defer m.Close()
	defer slave.Close()
	if got, err := l.Exchange(ctx, Tx{Send: "C", Reply: true}); err != nil || got != "OK" {
		t.Fatalf("after the port came back: %q, %v", got, err)
	}
}

func TestTCPLinkAndSharedPool(t *testing.T) {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	go func() {
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			go func() {
				defer c.Close()
				r := bufio.NewReader(c)
				for {
					line, err := r.ReadString('\n')
					if err != nil {
						return
					}
					// A slow device: a reply interleaved with another
					// instrument's command would be caught below.
					time.Sleep(time.Millisecond)
					c.Write([]byte("echo " + strings.TrimSpace(line) + "\n"))
				}
			}()
		}
	}()
	addr := ln.Addr().String()
	var pool Pool
	mk := func() (Exchanger, error) { return NewLink(addr, TCPOpener(addr), Framing{}, nil), nil }
	a, err := pool.Get(addr, Framing{}, mk)
	if err != nil {
		t.Fatal(err)
	}
	b, err := pool.Get(addr, Framing{}, mk)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := pool.Get(addr, Framing{Timeout: time.Second}, mk); err == nil {
		t.Fatal("same port with other settings: no error")
	}
	if pool.Users(addr) != 2 {
		t.Fatalf("users = %d, want 2", pool.Users(addr))
	}
	var wg sync.WaitGroup
	for i, ex := range []Exchanger{a, b} {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for j := 0; j < 30; j++ {
				cmd := strings.Repeat(string(rune('a'+i)), j%5+1)
				got, err := ex.Exchange(context.Background(), Tx{Send: cmd, Reply: true})
				if err != nil || got != "echo "+cmd {
					t.Errorf("axis %d: %q → %q, %v", i, cmd, got, err)
					return
				}
			}
		}()
	}
	wg.Wait()
	a.Close()
	a.Close()
	if pool.Users(addr) != 1 {
		t.Fatalf("users after one close (twice) = %d, want 1", pool.Users(addr))
	}
	b.Close()
	if pool.Users(addr) != 0 {
		t.Fatalf("users after all closed = %d", pool.Users(addr))
	}
}

func TestRecordAndReplay(t *testing.T) {
	dir := t.TempDir()
	rec, err := NewRecorder(dir)
	if err != nil {
		t.Fatal(err)
	}
	dev := &scripted{replies: map[string]string{"POS?": "POS 1.000", "PWR?": "PWR 3.5 uW"}}
	ex := Recorded(dev, rec)
	ctx := context.Background()
	ex.Exchange(ctx, Tx{Instrument: "stage", Send: "POS?", Reply: true})
	ex.Exchange(ctx, Tx{Instrument: "meter", Send: "PWR?", Reply: true})
	ex.Exchange(ctx, Tx{Instrument: "stage", Send: "GONE?", Reply: true})
	if err := rec.Close(); err != nil {
		t.Fatal(err)
	}
	rp, err := LoadReplay(rec.Path())
	if err != nil {
		t.Fatal(err)
	}
	// The meter's transaction may come first: instruments are independent.
	if got, err := rp.Exchange(ctx, Tx{Instrument: "meter", Send: "PWR?", Reply: true}); err != nil || got != "PWR 3.5 uW" {
		t.Fatalf("meter: %q, %v", got, err)
	}
	if got, err := rp.Exchange(ctx, Tx{Instrument: "stage", Send: "POS?", Reply: true}); err != nil || got != "POS 1.000" {
		t.Fatalf("stage: %q, %v", got, err)
	}
	if _, err := rp.Exchange(ctx, Tx{Instrument: "stage", Send: "GONE?", Reply: true}); !errors.Is(err, ErrTimeout) {
		t.Fatalf("recorded timeout replayed as %v", err)
	}
	if _, err := rp.Exchange(ctx, Tx{Instrument: "stage", Send: "POS?", Reply: true}); !errors.Is(err, ErrReplay) {
		t.Fatalf("past the end: %v", err)
	}
	rp2, _ := LoadReplay(rec.Path())
	if _, err := rp2.Exchange(ctx, Tx{Instrument: "stage", Send: "MOVE 3", Reply: true}); !errors.Is(err, ErrReplay) || !strings.Contains(err.Error(), `"POS?"`) {
		t.Fatalf("mismatch: %v", err)
	}
}

type scripted struct{ replies map[string]string }

func (s *scripted) Exchange(ctx context.Context, tx Tx) (string, error) {
	if r, ok := s.replies[tx.Send]; ok {
		return r, nil
	}
	return "", ErrTimeout
}
func (s *scripted) Close() error { return nil }

func FuzzParseReplay(f *testing.F) {
	f.Add(`{"time":"2026-01-01T00:00:00Z","instrument":"stage","sent":"POS?","received":"POS 1","latency_ms":2.5}`)
	f.Add(`{"instrument":"x","sent":"a","error":"boom"}` + "\n\n" + `{"instrument":""}`)
	f.Add("not json")
	f.Fuzz(func(t *testing.T, s string) {
		rp, err := ParseReplay("fuzz.jsonl", strings.NewReader(s))
		if err != nil {
			if !strings.HasPrefix(err.Error(), "fuzz.jsonl:") {
				t.Fatalf("error without file:line: %v", err)
			}
			return
		}
		for inst, list := range rp.recs {
			for _, r := range list {
				if _, err := rp.Exchange(context.Background(), Tx{Instrument: inst, Send: r.Sent}); err != nil && r.Error == "" {
					t.Fatalf("replay of a clean record failed: %v", err)
				}
			}
		}
	})
}
