package cli

import (
	"bytes"
	"io"
	"strings"
	"testing"
	"time"

	"github.com/creack/pty"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

func feed(p *progress, n int) {
	p.setTotal(uint64(n), []string{"x", "xx"})
	for i := range n {
		p.point(&glissv1.Point{Seq: uint64(i), Counts: []uint64{uint64(100 + i), uint64(50 + i)}})
		time.Sleep(2 * time.Millisecond)
	}
	p.line("scan s: SUCCEEDED (all points stored)")
	p.done()
}

// On a terminal the bar is redrawn in place (carriage return, erase line)
// with points done, ETA and the last point's counts.
func TestProgressOnTerminal(t *testing.T) {
	t.Setenv("TERM", "xterm")
	master, slave, err := pty.Open()
	if err != nil {
		t.Skipf("no pseudo-terminal: %v", err)
	}
	defer master.Close()
	got := make(chan string)
	go func() {
		b, _ := io.ReadAll(master) // ends with EIO once the slave is closed
		got <- string(b)
	}()
	p := newProgress(slave)
	if !p.tty {
		t.Fatal("a pty slave is not taken for a terminal")
	}
	feed(p, 60)
	slave.Close()
	out := <-got
	if !strings.Contains(out, "\r\x1b[K") {
		t.Errorf("no in-place redraw in %q", out)
	}
	for _, want := range []string{"60/60", "ETA 0s", "last: x=159 xx=109", "100.0%", "SUCCEEDED"} {
		if !strings.Contains(out, want) {
			t.Errorf("terminal output lacks %q:\n%q", want, out)
		}
	}
	if strings.Contains(out, "progress:") {
		t.Errorf("plain lines on a terminal: %q", out)
	}
}

// Elsewhere (a pipe, a log file) progress is plain lines, at most one per
// 5 s plus the last point, and no control characters.
func TestProgressPlainLines(t *testing.T) {
	var b bytes.Buffer
	p := newProgress(&b)
	if p.tty {
		t.Fatal("a buffer is taken for a terminal")
	}
	feed(p, 30)
	out := b.String()
	if strings.ContainsAny(out, "\r\x1b") {
		t.Errorf("control characters in plain output: %q", out)
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	// First point, last point, the state line: 30 points in ~60 ms give no 5-s line between.
	if len(lines) != 3 || !strings.HasPrefix(lines[0], "progress: 1/30 points (3%)") ||
		lines[1] != "progress: 30/30 points (100%), ETA 0s, last point x=129 xx=79" {
		t.Errorf("plain output:\n%s", out)
	}
}
