package store

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"google.golang.org/protobuf/proto"
)

// envCrashChild, when set to a database path, turns the test binary into
// the writer process of TestCrashSafety.
const envCrashChild = "GLISS_STORE_CRASH_CHILD"

const crashScanID = "01CRASH"

// runCrashChild is the child: it appends points as fast as it can and prints
// "ok SEQ" for each point whose done reported success, i.e. each point a
// watcher could have been told of. It also rewrites the scan record now and
// then, so record updates are in flight at the kill too. It never returns
// normally: the parent kills it (or it gives up after a minute).
func runCrashChild() bool {
	path := os.Getenv(envCrashChild)
	if path == "" {
		return false
	}
	fail := func(format string, a ...any) {
		fmt.Fprintf(os.Stdout, "fail "+format+"\n", a...)
		os.Exit(3)
	}
	batch, _ := strconv.Atoi(os.Getenv(envCrashChild + "_BATCH"))
	s, err := Open(path, Options{MaxBatch: batch})
	if err != nil {
		fail("%v", err)
	}
	ctx := context.Background()
	sc := testScan(crashScanID, "crash", glissv1.ScanState_SCAN_STATE_RUNNING, t0)
	if err := s.CreateScan(ctx, sc); err != nil && !errors.Is(err, ErrExists) {
		fail("%v", err)
	}
	n, err := s.PointCount(crashScanID)
	if err != nil {
		fail("%v", err)
	}
	out := os.Stdout
	fmt.Fprintf(out, "ready %d\n", n)
	var line []byte
	deadline := time.Now().Add(time.Minute)
	for seq := n; time.Now().Before(deadline); seq++ {
		err := s.AppendPoint(ctx, testPoint(crashScanID, seq), func(_ *glissv1.Point, err error) {
			// Runs on the writer goroutine, after the fsync: one write
			// syscall per point, so the parent has it before the next one.
			if err != nil {
				fail("point %d: %v", seq, err)
			}
			line = strconv.AppendUint(append(line[:0], "ok "...), seq, 10)
			line = append(line, '\n')
			if _, err := out.Write(line); err != nil {
				os.Exit(4)
			}
		})
		if err != nil {
			fail("%v", err)
		}
		if seq%1000 == 999 {
			sc.Reason = fmt.Sprintf("update at %d", seq)
			if err := s.PutScan(ctx, sc); err != nil {
				fail("%v", err)
			}
		}
	}
	os.Exit(5)
	return true
}

// TestCrashSafety SIGKILLs a writer process at random moments and checks
// after each kill that every point it was told is durable is stored
// unchanged, that the stored points are 0 … n-1, and that the file passes
// Check. Rounds reuse the file, so each child resumes from the stored count.
func TestCrashSafety(t *testing.T) {
	if testing.Short() {
		t.Skip("runs child processes (~5 s)")
	}
	path := t.TempDir() + "/crash.db"
	seed := uint64(time.Now().UnixNano())
	rng := rand.New(rand.NewPCG(seed, 1))
	t.Logf("kill moments from seed %d", seed)
	const rounds = 10
	var totalOK int
	for round := 0; round < rounds; round++ {
		batch := []int{1, 16, 256, 4096}[round%4]
		killAfter := time.Duration(30+rng.IntN(400)) * time.Millisecond
		start, oks := crashRound(t, path, batch, killAfter)
		totalOK += len(oks)

		s, err := Open(path, Options{})
		if err != nil {
			t.Fatalf("round %d: reopen after SIGKILL: %v", round, err)
		}
		if err := s.Check(); err != nil {
			t.Fatalf("round %d: %v", round, err)
		}
		n, err := s.PointCount(crashScanID)
		if err != nil {
			t.Fatalf("round %d: %v", round, err)
		}
		if n < start {
			t.Fatalf("round %d: %d points stored, the child had started from %d", round, n, start)
		}
		for _, seq := range oks {
			if seq >= n {
				t.Fatalf("round %d: point %d reported durable, only %d points stored", round, seq, n)
			}
		}
		want := uint64(0)
		err = s.ReadPoints(context.Background(), crashScanID, 0, func(p *glissv1.Point) error {
			if p.GetSeq() != want {
				return fmt.Errorf("point %d where %d expected: gap", p.GetSeq(), want)
			}
			if !proto.Equal(p, testPoint(crashScanID, want)) {
				return fmt.Errorf("point %d changed: %v", want, p)
			}
			want++
			return nil
		})
		if err != nil {
			t.Fatalf("round %d: %v", round, err)
		}
		if want != n {
			t.Fatalf("round %d: read %d points, count says %d", round, want, n)
		}
		sc, err := s.GetScan(crashScanID)
		if err != nil || sc.GetPointsStored() != n {
			t.Fatalf("round %d: scan record %v, %v", round, sc, err)
		}
		if err := s.Close(); err != nil {
			t.Fatal(err)
		}
		t.Logf("round %d: MaxBatch %d, killed after %v: started at %d, %d reported durable, %d stored",
			round, batch, killAfter, start, len(oks), n)
	}
	if totalOK == 0 {
		t.Fatal("no child ever reported a durable point: the test tested nothing")
	}
}

// crashRound runs one child and kills it killAfter its "ready" line. It
// returns the count the child started from and the seqs it reported durable.
func crashRound(t *testing.T, path string, batch int, killAfter time.Duration) (uint64, []uint64) {
	t.Helper()
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	cmd.Env = append(os.Environ(), envCrashChild+"="+path, fmt.Sprintf("%s_BATCH=%d", envCrashChild, batch))
	cmd.Stderr = os.Stderr
	stdout, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	ready := make(chan uint64, 1)
	var mu sync.Mutex
	var oks []uint64
	var bad []string
	readDone := make(chan struct{})
	go func() {
		defer close(readDone)
		sc := bufio.NewScanner(stdout)
		for sc.Scan() {
			line := sc.Text()
			switch {
			case strings.HasPrefix(line, "ok "):
				seq, err := strconv.ParseUint(line[3:], 10, 64)
				mu.Lock()
				if err != nil {
					bad = append(bad, line)
				} else {
					oks = append(oks, seq)
				}
				mu.Unlock()
			case strings.HasPrefix(line, "ready "):
				n, _ := strconv.ParseUint(line[6:], 10, 64)
				ready <- n
			default:
				mu.Lock()
				bad = append(bad, line)
				mu.Unlock()
			}
		}
	}()
	var start uint64
	select {
	case start = <-ready:
	case <-readDone:
		_ = cmd.Wait()
		t.Fatalf("child ended before it was ready: %v", bad)
	case <-time.After(20 * time.Second):
		_ = cmd.Process.Kill()
		t.Fatal("child not ready after 20 s")
	}
	time.Sleep(killAfter)
	if err := cmd.Process.Signal(syscall.SIGKILL); err != nil {
		t.Fatal(err)
	}
	<-readDone // the pipe holds everything the child wrote before it died
	err = cmd.Wait()
	var exit *exec.ExitError
	if !errors.As(err, &exit) || exit.ProcessState.Sys().(syscall.WaitStatus).Signal() != syscall.SIGKILL {
		t.Fatalf("child ended by %v, not by the SIGKILL; output %v", err, bad)
	}
	if len(bad) > 0 {
		t.Fatalf("child reported: %v", bad)
	}
	return start, oks
}
