package daemon_test

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"google.golang.org/protobuf/proto"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/service/store"
)

// buildGlissd builds cmd/glissd once into dir.
func buildGlissd(t testing.TB, dir string) string {
	t.Helper()
	bin := filepath.Join(dir, "glissd")
	cmd := exec.Command("go", "build", "-o", bin, "github.com/gliss-lab/gliss/cmd/glissd")
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("go build glissd: %v\n%s", err, out)
	}
	return bin
}

// proc is one glissd subprocess.
type proc struct {
	cmd  *exec.Cmd
	addr string
	mu   sync.Mutex
	tail []string // last lines of its log
	done chan error
}

var listenRE = regexp.MustCompile(`msg="glissd serving" listen=(\S+)`)

func startGlissd(t testing.TB, bin string, args ...string) *proc {
	t.Helper()
	cmd := exec.Command(bin, args...)
	stderr, err := cmd.StderrPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	p := &proc{cmd: cmd, done: make(chan error, 1)}
	addr := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(stderr)
		for sc.Scan() {
			line := sc.Text()
			if m := listenRE.FindStringSubmatch(line); m != nil {
				addr <- m[1]
			}
			p.mu.Lock()
			p.tail = append(p.tail, line)
			if len(p.tail) > 40 {
				p.tail = p.tail[len(p.tail)-40:]
			}
			p.mu.Unlock()
		}
		_, _ = io.Copy(io.Discard, stderr)
		p.done <- cmd.Wait()
	}()
	select {
	case p.addr = <-addr:
		return p
	case err := <-p.done:
		t.Fatalf("glissd exited before serving: %v\n%s", err, p.log())
	case <-time.After(30 * time.Second):
		cmd.Process.Kill()
		t.Fatalf("glissd did not start serving in 30 s\n%s", p.log())
	}
	return nil
}

func (p *proc) log() string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return strings.Join(p.tail, "\n")
}

// received is what the watchers got, per scan: seq → point. A point seen
// twice (in two streams after restarts) must be the same point.
type received struct {
	mu       sync.Mutex
	points   map[string]map[uint64]*glissv1.Point
	problems []string
}

func (rv *received) add(id string, p *glissv1.Point) {
	rv.mu.Lock()
	defer rv.mu.Unlock()
	m := rv.points[id]
	if m == nil {
		m = map[uint64]*glissv1.Point{}
		rv.points[id] = m
	}
	if old, ok := m[p.Seq]; ok && !proto.Equal(old, p) {
		rv.problems = append(rv.problems, fmt.Sprintf("scan %s point %d changed between two deliveries", id, p.Seq))
	}
	m[p.Seq] = p
}

// prefix is the number of points 0 … n-1 received without a gap.
func (rv *received) prefix(id string) uint64 {
	rv.mu.Lock()
	defer rv.mu.Unlock()
	var n uint64
	for {
		if _, ok := rv.points[id][n]; !ok {
			return n
		}
		n++
	}
}

func (rv *received) problem(format string, a ...any) {
	rv.mu.Lock()
	rv.problems = append(rv.problems, fmt.Sprintf(format, a...))
	rv.mu.Unlock()
}

// TestKillHarness runs glissd as a subprocess and SIGKILLs it at random
// moments while 24 scans run, restarting it with --auto-resume each time,
// until every scan has ended. Every scan must end with exactly its planned
// points (seq 0 … n-1, no duplicate, no gap), every point a watcher
// received must be in the store unchanged, and the store's consistency
// check (bbolt's and the store's own) must pass.
func TestKillHarness(t *testing.T) {
	tmp := t.TempDir()
	bin := buildGlissd(t, tmp)
	data := filepath.Join(tmp, "data")
	args := []string{"--listen", "127.0.0.1:0", "--data", data, "--sim-speed", "400", "--auto-resume", "--log-level", "info"}
	rng := rand.New(rand.NewPCG(20261202, 5))

	const nScans = 24
	planned := map[string]uint64{}
	var order []string
	rv := &received{points: map[string]map[uint64]*glissv1.Point{}}
	kills, killedRunning := 0, 0
	deadline := time.Now().Add(75 * time.Second)
	for cycle := 0; ; cycle++ {
		if time.Now().After(deadline) {
			t.Fatalf("scans not all ended after %d kills", kills)
		}
		p := startGlissd(t, bin, args...)
		ctx, cancel := context.WithCancel(context.Background())
		c, err := client.Dial(ctx, p.addr, client.WithHealthTimeout(10*time.Second))
		if err != nil {
			p.cmd.Process.Kill()
			cancel()
			t.Fatalf("dial: %v\n%s", err, p.log())
		}
		// Scans are submitted over time: up to three per start.
		for i := 0; i < 3 && len(order) < nScans; i++ {
			n := 20 + rng.IntN(30)
			spec := client.ChirpSpec(client.Range(-20, 20, uint32(n)), client.Options{GateMS: 20, Name: fmt.Sprintf("kill-%02d", len(order))})
			sc, err := c.Submit(ctx, spec)
			if err != nil {
				p.cmd.Process.Kill()
				t.Fatalf("submit: %v", err)
			}
			planned[sc.Id] = uint64(n)
			order = append(order, sc.Id)
		}
		// Where do the scans stand?
		open := 0
		running := ""
		for _, id := range order {
			sc, err := c.Get(ctx, id)
			if err != nil {
				p.cmd.Process.Kill()
				t.Fatalf("get %s: %v", id, err)
			}
			switch sc.State {
			case glissv1.ScanState_SCAN_STATE_SUCCEEDED:
			case glissv1.ScanState_SCAN_STATE_QUEUED, glissv1.ScanState_SCAN_STATE_RUNNING:
				open++
			default:
				p.cmd.Process.Kill()
				t.Fatalf("scan %s is %v (%s)", id, sc.State, sc.Reason)
			}
		}
		var wg sync.WaitGroup
		if open > 0 {
			// Watch every scan not yet complete, from the first point not yet received.
			for _, id := range order {
				from := rv.prefix(id)
				if from == planned[id] {
					continue
				}
				wg.Add(1)
				go func(id string, from uint64) {
					defer wg.Done()
					next := from
					for ev, err := range c.Watch(ctx, id, from) {
						if err != nil {
							return // the daemon was killed
						}
						if pt := ev.GetPoint(); pt != nil {
							if pt.Seq != next {
								rv.problem("scan %s: watch from %d delivered seq %d after %d", id, from, pt.Seq, next-1)
							}
							next = pt.Seq + 1
							rv.add(id, pt)
						}
						if sc := ev.GetScan(); sc != nil && sc.State == glissv1.ScanState_SCAN_STATE_RUNNING {
							rv.mu.Lock()
							running = id
							rv.mu.Unlock()
						}
					}
				}(id, from)
			}
		}
		if open == 0 && len(order) == nScans {
			// Everything ended: a graceful stop (SIGTERM) this time.
			cancel()
			c.Close()
			if err := p.cmd.Process.Signal(syscall.SIGTERM); err != nil {
				t.Fatal(err)
			}
			if err := <-p.done; err != nil {
				t.Fatalf("glissd after SIGTERM: %v\n%s", err, p.log())
			}
			break
		}
		time.Sleep(time.Duration(30+rng.IntN(300)) * time.Millisecond)
		rv.mu.Lock()
		wasRunning := running != ""
		rv.mu.Unlock()
		if err := p.cmd.Process.Kill(); err != nil { // SIGKILL
			t.Fatal(err)
		}
		err = <-p.done
		var ee *exec.ExitError
		if !errors.As(err, &ee) || ee.Sys().(syscall.WaitStatus).Signal() != syscall.SIGKILL {
			t.Fatalf("glissd ended with %v before the kill\n%s", err, p.log())
		}
		kills++
		if wasRunning {
			killedRunning++
		}
		cancel()
		wg.Wait()
		c.Close()
	}

	// The store after the last stop.
	st, err := store.Open(filepath.Join(data, "gliss.db"), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	if err := st.Check(); err != nil {
		t.Errorf("store check: %v", err)
	}
	lost, interrupted := 0, 0
	var totalPoints uint64
	for _, id := range order {
		sc, err := st.GetScan(id)
		if err != nil {
			t.Fatal(err)
		}
		for _, tr := range sc.Transitions {
			if tr.To == glissv1.ScanState_SCAN_STATE_INTERRUPTED {
				interrupted++
				break
			}
		}
		if sc.State != glissv1.ScanState_SCAN_STATE_SUCCEEDED || sc.PointsStored != planned[id] {
			t.Errorf("scan %s: %v with %d points stored, planned %d", id, sc.State, sc.PointsStored, planned[id])
		}
		stored := map[uint64]*glissv1.Point{}
		var next uint64
		err = st.ReadPoints(context.Background(), id, 0, func(p *glissv1.Point) error {
			if p.Seq != next {
				return fmt.Errorf("seq %d after %d", p.Seq, next-1)
			}
			next++
			stored[p.Seq] = p
			return nil
		})
		if err != nil {
			t.Errorf("scan %s: read points: %v", id, err)
		}
		if next != planned[id] {
			t.Errorf("scan %s: %d points stored, planned %d", id, next, planned[id])
		}
		totalPoints += next
		rv.mu.Lock()
		for seq, p := range rv.points[id] {
			if sp, ok := stored[seq]; !ok || !proto.Equal(sp, p) {
				lost++
				t.Errorf("scan %s: point %d received by a watcher is not in the store unchanged", id, seq)
			}
		}
		rv.mu.Unlock()
	}
	var got int
	for _, m := range rv.points {
		got += len(m)
	}
	if got < int(totalPoints)*9/10 {
		t.Errorf("watchers received %d of %d points: too few for the comparison to mean much", got, totalPoints)
	}
	for _, pr := range rv.problems {
		t.Error(pr)
	}
	if interrupted < 20 {
		t.Errorf("only %d of %d scans were interrupted by a kill: the harness must kill during at least 20 scans", interrupted, nScans)
	}
	t.Logf("kill harness: %d SIGKILLs (%d while a scan was running), %d of %d scans interrupted and resumed, %d points stored, %d received by watchers, %d points lost",
		kills, killedRunning, interrupted, nScans, totalPoints, got, lost)
}
