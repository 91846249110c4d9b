package cli

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"
)

type syncBuf struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuf) Write(p []byte) (int, error) { s.mu.Lock(); defer s.mu.Unlock(); return s.b.Write(p) }
func (s *syncBuf) String() string              { s.mu.Lock(); defer s.mu.Unlock(); return s.b.String() }

func TestSimPortsServesUntilInterrupted(t *testing.T) {
	dir := t.TempDir()
	ctx, cancel := context.WithCancel(context.Background())
	var out, errb syncBuf
	done := make(chan error, 1)
	go func() {
		done <- Run(ctx, &Env{Stdout: &out, Stderr: &errb}, []string{"sim", "ports", "--dir", dir, "--seed", "4", "--sim-speed", "1000"})
	}()
	deadline := time.Now().Add(10 * time.Second)
	for !strings.Contains(out.String(), "serving until interrupted") {
		if time.Now().After(deadline) {
			cancel()
			t.Fatalf("no banner; stdout %q stderr %q", out.String(), errb.String())
		}
		time.Sleep(20 * time.Millisecond)
	}
	if !strings.Contains(out.String(), filepath.Join(dir, "stage")+" -> /dev/pts/") {
		t.Errorf("device paths not printed:\n%s", out.String())
	}
	// The written bench file drives the ports through the real serial driver.
	pout, perr, code := runCLI(t, context.Background(), "bench", "check", "--probe", filepath.Join(dir, "bench.yaml"))
	if code != 0 || !strings.Contains(pout, "at 600.0000 mm") || !strings.Contains(pout, "gliss") {
		t.Errorf("probe through the virtual ports: code %d\n%s%s", code, pout, perr)
	}
	cancel()
	select {
	case err := <-done:
		if err != nil {
			t.Fatal(err)
		}
	case <-time.After(10 * time.Second):
		t.Fatal("gliss sim ports did not stop when interrupted")
	}
	if _, err := os.Lstat(filepath.Join(dir, "stage")); !os.IsNotExist(err) {
		t.Errorf("port link left behind after stop: %v", err)
	}
	_, errs, code := runCLI(t, context.Background(), "sim", "ports", "--dir", dir, "--faults", "timeout=2")
	if code != 2 || !strings.Contains(errs, "timeout=2: want a probability in [0, 1]") {
		t.Fatalf("bad faults: code %d %s", code, errs)
	}
}
