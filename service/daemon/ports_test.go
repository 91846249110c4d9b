package daemon_test

import (
	"context"
	"testing"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/benchfile"
	_ "github.com/gliss-lab/gliss/drivers/lineproto"
	"github.com/gliss-lab/gliss/service/daemon"
	simbench "github.com/gliss-lab/gliss/sim/bench"
	"github.com/gliss-lab/gliss/sim/ports"
)

// TestSameMapThroughVirtualPorts: the same map, through the real serial
// drivers on pseudo-terminals and through the in-process simulated bench
// with the same seed, gives the same counts, point by point.
func TestSameMapThroughVirtualPorts(t *testing.T) {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	const seed = 11
	srv, err := ports.Start(ctx, ports.Options{Dir: t.TempDir(), Sim: simbench.Options{Seed: seed, Instant: true}})
	if err != nil {
		t.Skipf("no pseudo-terminals here: %v", err)
	}
	// Cleanups run last-in first-out: the daemons (registered later) close
	// their serial ports before the virtual ports stop.
	t.Cleanup(func() { srv.Close() })
	benchYAML, err := srv.WriteBenchYAML()
	if err != nil {
		t.Fatal(err)
	}
	spec := client.MapSpec(client.Range(-20, 20, 3), client.Range(1, 25, 3), client.Options{GateMS: 100, Snake: true})

	run := func(cfg daemon.Config) []*glissv1.Point {
		_, c := startDaemon(t, cfg)
		sc, err := c.Submit(ctx, spec)
		if err != nil {
			t.Fatal(err)
		}
		w := watch(t, ctx, c, sc.Id, 0)
		if w.final.GetState() != glissv1.ScanState_SCAN_STATE_SUCCEEDED {
			t.Fatalf("scan ended %v: %s", w.final.GetState(), w.final.GetReason())
		}
		return w.points
	}
	viaPorts := run(daemon.Config{BenchFile: benchYAML, OpenBench: func(ctx context.Context, path string) (*drivers.Bench, error) {
		return benchfile.Load(ctx, path, benchfile.Options{})
	}})
	inProcess := run(daemon.Config{SimSeed: seed, SimInstant: true})
	if len(viaPorts) != 9 || len(inProcess) != 9 {
		t.Fatalf("points: %d through the ports, %d in process, want 9", len(viaPorts), len(inProcess))
	}
	var total uint64
	for i := range viaPorts {
		a, b := viaPorts[i].Counts, inProcess[i].Counts
		if len(a) != 2 || a[0] != b[0] || a[1] != b[1] {
			t.Errorf("point %d: counts %v through the ports, %v in process", i, a, b)
		}
		total += a[1]
	}
	if total == 0 {
		t.Error("no XX counts at all: the map measured nothing")
	}
}
