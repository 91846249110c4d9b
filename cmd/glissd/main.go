// Command glissd is the gliss daemon: it runs scans on a bench of
// instruments (real, from a bench file, or the built-in simulated bench),
// stores every point in bbolt before anyone hears of it, and serves the
// gliss.v1 gRPC API.
//
//	glissd --listen 127.0.0.1:7355 --data DIR [--bench FILE]
//	glissd --listen 0.0.0.0:7355 --data DIR --tls-cert CERT.pem --tls-key KEY.pem --tokens TOKENS
//
// Listening beyond loopback needs TLS and a token file (one "NAME ROLE TOKEN"
// a line, ROLE observe or operate, mode 600; see service/auth).
package main

import (
	"context"
	"flag"
	"fmt"
	"log/slog"
	"os"
	"os/signal"
	"syscall"
	"time"

	"github.com/gliss-lab/gliss/service/daemon"
)

func main() {
	os.Exit(run(os.Args[1:]))
}

func run(args []string) int {
	fs := flag.NewFlagSet("glissd", flag.ContinueOnError)
	listen := fs.String("listen", daemon.DefaultListen, "host:port to serve gRPC on (loopback only unless TLS and tokens are configured)")
	data := fs.String("data", "", "directory of the scan store (required)")
	benchFile := fs.String("bench", "", "bench file describing the instruments (default: the built-in simulated bench)")
	seed := fs.Uint64("sim-seed", 1, "seed of the simulated bench's noise (same seed, same scan)")
	speed := fs.Float64("sim-speed", 1, "run the simulated bench's motion, gates and settle times this many times faster than real time (1 to 1e6)")
	instant := fs.Bool("sim-instant", false, "simulated instruments take no time at all (benchmarks)")
	quiet := fs.Bool("sim-quiet", false, "simulated laser without power noise and power meter without reading noise (benchmarks)")
	record := fs.String("record", "", "write every instrument transaction (time, instrument, sent, received, latency) as JSON lines to a new file in this directory")
	autoResume := fs.Bool("auto-resume", false, "continue INTERRUPTED scans at start, from their first point not stored")
	logLevel := fs.String("log-level", "info", "debug, info, warn or error")
	tlsCert := fs.String("tls-cert", "", "PEM certificate to serve TLS with (with --tls-key; required beyond loopback)")
	tlsKey := fs.String("tls-key", "", "PEM private key of --tls-cert")
	tokens := fs.String("tokens", "", "bearer-token file, one `NAME ROLE TOKEN` a line, ROLE observe or operate, mode 600 (required beyond loopback)")
	fs.Usage = func() {
		fmt.Fprintf(fs.Output(), "glissd: the gliss daemon\n\nUsage: glissd --data DIR [--listen ADDR] [--bench FILE] [flags]\n\nFlags:\n")
		fs.PrintDefaults()
		fmt.Fprintf(fs.Output(), "\nExamples:\n  glissd --data ~/gliss-data --sim-speed 100\n  glissd --data ~/gliss-data --listen 0.0.0.0:7355 --tls-cert cert.pem --tls-key key.pem --tokens tokens.txt\n")
	}
	if err := fs.Parse(args); err != nil {
		if err == flag.ErrHelp {
			return 0
		}
		return 2
	}
	var level slog.Level
	if err := level.UnmarshalText([]byte(*logLevel)); err != nil {
		fmt.Fprintf(os.Stderr, "glissd: --log-level %q: use debug, info, warn or error\n", *logLevel)
		return 2
	}
	if *data == "" {
		fmt.Fprintln(os.Stderr, "glissd: --data is required: give a directory for the scan store, e.g. --data ./gliss-data")
		return 2
	}
	if *speed < 1 || *speed > 1e6 || *speed != *speed {
		fmt.Fprintf(os.Stderr, "glissd: --sim-speed %v: allowed 1 to 1e6\n", *speed)
		return 2
	}
	if *record != "" && *benchFile == "" {
		fmt.Fprintln(os.Stderr, "glissd: --record needs --bench: the built-in simulated bench talks to no transport (serve it on virtual ports with `gliss sim ports` and load their bench file)")
		return 2
	}
	log := slog.New(slog.NewTextHandler(os.Stderr, &slog.HandlerOptions{Level: level}))
	slog.SetDefault(log)
	gcPct, memLimit := daemon.ApplyGCPolicy()
	log.Debug("garbage collector", "gogc_percent", gcPct, "memory_limit_mib", memLimit>>20)

	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	d, err := daemon.Start(ctx, daemon.Config{
		Listen: *listen, DataDir: *data, BenchFile: *benchFile, OpenBench: benchOpener(*record, log),
		SimSeed: *seed, SimSpeed: *speed, SimInstant: *instant, SimQuiet: *quiet, AutoResume: *autoResume, Logger: log,
		TLSCertFile: *tlsCert, TLSKeyFile: *tlsKey, TokensFile: *tokens,
	})
	if err != nil {
		fmt.Fprintln(os.Stderr, "glissd:", err)
		return 1
	}
	select {
	case <-ctx.Done():
		log.Info("signal received: finishing the current point, then stopping")
	case err := <-waitErr(d):
		log.Error("server stopped", "err", err)
	}
	sctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	if err := d.Stop(sctx); err != nil {
		fmt.Fprintln(os.Stderr, "glissd: stop:", err)
		return 1
	}
	return 0
}

func waitErr(d *daemon.Daemon) <-chan error {
	ch := make(chan error, 1)
	go func() { ch <- d.Wait() }()
	return ch
}
