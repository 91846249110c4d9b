package cli

import (
	"context"
	"fmt"
	"io"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/service/daemon"
)

func init() {
	register("demo", "run a power × chirp map on the built-in simulated bench, end to end", &Command{
		Name: "run", Summary: "start an embedded glissd on the simulated bench, map the demo dot, write the CSV",
		Usage:   "[--dir DIR] [--gdd-ps2 FROM:TO:N] [--power-uw FROM:TO:N] [--gate-ms G] [--sim-speed S] [--seed N]",
		Example: "gliss demo   (writes ./gliss-demo/map.csv)",
		Run:     runDemo,
	})
	setDefault("demo", "run")
}

func runDemo(ctx context.Context, env *Env, args []string) error {
	c := groups["demo"].Commands["run"]
	fs := NewFlagSet(env, "demo", c)
	dir := fs.String("dir", "gliss-demo", "directory for the demo's data and CSV")
	gdd := fs.String("gdd-ps2", "-25:25:21", "GDD axis, ps²")
	power := fs.String("power-uw", "0.05:64:33", "power axis, µW (spaced in amplitude: linear in pulse area)")
	gate := fs.Float64("gate-ms", 200, "counter gate per point, ms")
	speed := fs.Float64("sim-speed", 200, "simulated time runs this many times faster than real time")
	seed := fs.Uint64("seed", 1, "seed of the simulated bench")
	if err := Parse(fs, args); err != nil {
		return err
	}
	if *speed < 1 || *speed > 1e6 || math.IsNaN(*speed) {
		return Usagef("--sim-speed %v: allowed 1 to 1e6", *speed)
	}
	gv, err := axisValues("gdd-ps2", *gdd)
	if err != nil {
		return err
	}
	pv, err := axisValues("power-uw", *power)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(*dir, 0o755); err != nil {
		return fmt.Errorf("--dir %s: %w", *dir, err)
	}
	logf, err := os.Create(filepath.Join(*dir, "glissd.log"))
	if err != nil {
		return err
	}
	defer logf.Close()
	daemon.ApplyGCPolicy() // the embedded daemon runs as glissd does
	d, err := daemon.Start(ctx, daemon.Config{
		Listen: "127.0.0.1:0", DataDir: filepath.Join(*dir, "data"), SimSeed: *seed, SimSpeed: *speed,
		Logger: slog.New(slog.NewTextHandler(logf, nil)),
	})
	if err != nil {
		return err
	}
	defer func() {
		sctx, cancel := context.WithTimeout(context.Background(), time.Minute)
		defer cancel()
		d.Stop(sctx)
	}()
	fmt.Fprintf(env.Stderr, "gliss demo: embedded glissd on %s, simulated bench (demo dot, %g× real time), data in %s\n", d.Addr(), *speed, filepath.Join(*dir, "data"))
	cl, err := client.Dial(ctx, d.Addr())
	if err != nil {
		return err
	}
	defer cl.Close()
	spec := client.MapSpec(gv, pv, client.Options{Name: "demo power × chirp map", GateMS: *gate, Snake: true, AmplitudeSpacing: true,
		Notes: "gliss demo on the simulated bench: invented demo dot, not a measurement"})
	sc, err := cl.Submit(ctx, spec)
	if err != nil {
		return rpcError(err, map[string]string{"spec.axes[0]": "--gdd-ps2 " + *gdd, "spec.axes[1]": "--power-uw " + *power, "spec.gate_ms": "--gate-ms"})
	}
	fmt.Fprintln(env.Stdout, sc.Id)
	fmt.Fprintf(env.Stderr, "map %s: %d points (%s in real time on a real bench)\n", sc.Id, sc.Preview.GetPoints(), fmtDuration(sc.Preview.GetEstimatedDurationS()**speed))
	if err := watchScan(ctx, env, cl, sc.Id, 0); err != nil {
		return err
	}
	final, err := cl.Get(ctx, sc.Id)
	if err != nil {
		return err
	}
	out := filepath.Join(*dir, "map.csv")
	if err := writeOut(env, out, func(w io.Writer) (uint64, error) { return client.WriteCSV(w, final, cl.Points(ctx, sc.Id, 0)) }); err != nil {
		return err
	}
	return demoSummary(ctx, env, cl, final)
}

// demoSummary prints, per GDD, the largest XX count rate of the map: the
// Rabi maximum at zero chirp against the adiabatic plateau at large |GDD|.
func demoSummary(ctx context.Context, env *Env, cl *client.Client, sc *glissv1.Scan) error {
	xx := -1
	for i, ch := range sc.Channels {
		if ch == "xx" {
			xx = i
		}
	}
	if xx < 0 {
		return nil
	}
	best := map[float64][2]float64{}
	var order []float64
	for p, err := range cl.Points(ctx, sc.Id, 0) {
		if err != nil {
			return err
		}
		g := p.Values[0]
		rate := float64(p.Counts[xx]) / (p.GateMs / 1000)
		b, ok := best[g]
		if !ok {
			order = append(order, g)
		}
		if rate > b[0] {
			best[g] = [2]float64{rate, p.Values[1]}
		}
	}
	fmt.Fprintln(env.Stderr, "largest XX count rate per GDD (simulated):")
	for _, g := range order {
		b := best[g]
		fmt.Fprintf(env.Stderr, "  GDD %+7.2f ps²: %8.0f counts/s at %7.3f µW\n", g, b[0], b[1])
	}
	return nil
}
