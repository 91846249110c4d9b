package cli

import (
	"context"
	"fmt"
	"log/slog"
	"math"

	simbench "github.com/gliss-lab/gliss/sim/bench"
	"github.com/gliss-lab/gliss/sim/ports"
)

const simSummary = "simulated instruments on virtual serial ports"

func init() {
	register("sim", simSummary, &Command{
		Name: "ports", Summary: "serve each simulated instrument on its own pseudo-terminal and write DIR/bench.yaml for them",
		Usage:   "--dir DIR [--seed N] [--faults SPEC] [--baud B] [--sim-speed S]",
		Example: "gliss sim ports --dir /tmp/gliss-ports --faults timeout=0.01,garble=0.005,vanish=300s\nglissd --bench /tmp/gliss-ports/bench.yaml",
		Run:     runSimPorts,
	})
}

func runSimPorts(ctx context.Context, env *Env, args []string) error {
	c := groups["sim"].Commands["ports"]
	fs := NewFlagSet(env, "sim", c)
	dir := fs.String("dir", "", "directory for the port links (DIR/stage, …) and DIR/bench.yaml (required)")
	seed := fs.Uint64("seed", 1, "seed of the simulated bench")
	faultSpec := fs.String("faults", "", "faults to inject, e.g. timeout=0.01,garble=0.005,partial=0.01,unexpected=0.01,error=0.01,vanish=300s,down=2s (see sim/ports/PROTOCOL.md)")
	baud := fs.Int("baud", 0, "emulate the wire time of this baud rate, 10 bits a byte (0: none)")
	speed := fs.Float64("sim-speed", 1, "simulated time runs this many times faster than real time (motion, gates)")
	if err := Parse(fs, args); err != nil {
		return err
	}
	if *dir == "" {
		return Usagef("gliss sim ports: --dir missing (where to put the port links and bench.yaml)")
	}
	if fs.NArg() > 0 {
		return Usagef("gliss sim ports: unexpected argument %q", fs.Arg(0))
	}
	if *baud < 0 || *baud > 4000000 {
		return Usagef("--baud %d: allowed 0 (no emulation) or 50 to 4000000", *baud)
	}
	if *baud > 0 && *baud < 50 {
		return Usagef("--baud %d: allowed 0 (no emulation) or 50 to 4000000", *baud)
	}
	if *speed < 1 || *speed > 1e6 || math.IsNaN(*speed) {
		return Usagef("--sim-speed %v: allowed 1 to 1e6", *speed)
	}
	faults, err := ports.ParseFaults(*faultSpec)
	if err != nil {
		return Usagef("--faults: %v", err)
	}
	log := slog.New(slog.NewTextHandler(env.Stderr, &slog.HandlerOptions{Level: slog.LevelInfo}))
	srv, err := ports.Start(ctx, ports.Options{
		Dir: *dir, Baud: *baud, Faults: faults, Logger: log,
		Sim: simbench.Options{Seed: *seed, Speed: *speed},
	})
	if err != nil {
		return err
	}
	defer srv.Close()
	path, err := srv.WriteBenchYAML()
	if err != nil {
		return err
	}
	devs := srv.Devices()
	links := srv.Paths()
	for _, n := range srv.Names() {
		fmt.Fprintf(env.Stdout, "%-11s %s -> %s\n", n, links[n], devs[n])
	}
	fmt.Fprintf(env.Stdout, "bench file: %s\n", path)
	if faults.Any() {
		fmt.Fprintf(env.Stdout, "faults: %s\n", faults)
	}
	if *baud > 0 {
		fmt.Fprintf(env.Stdout, "wire time: %d baud, 10 bits a byte\n", *baud)
	}
	fmt.Fprintln(env.Stdout, "serving until interrupted (Ctrl-C)")
	<-ctx.Done()
	return nil
}
