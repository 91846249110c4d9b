// Package daemon assembles glissd: the store, the bench (simulated or from
// a bench file), the scan engine and the gRPC server with health and
// reflection. cmd/glissd and `gliss demo` (an embedded daemon) both use it.
package daemon

import (
	"context"
	"crypto/tls"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/health"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/keepalive"
	"google.golang.org/grpc/reflection"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/service/auth"
	"github.com/gliss-lab/gliss/service/engine"
	"github.com/gliss-lab/gliss/service/rpc"
	"github.com/gliss-lab/gliss/service/store"
	simbench "github.com/gliss-lab/gliss/sim/bench"
)

// DefaultListen is the daemon's default address: loopback only.
const DefaultListen = "127.0.0.1:7355"

// Config is what glissd is started with.
type Config struct {
	// Listen is host:port; loopback unless TLS and tokens are configured.
	Listen string
	// DataDir holds the store (gliss.db).
	DataDir string
	// BenchFile describes the instruments; empty means the built-in simulated bench.
	BenchFile string
	// OpenBench, when set, opens the bench from BenchFile (the bench-file
	// loader registers itself here, keeping this package free of it).
	OpenBench func(ctx context.Context, path string) (*drivers.Bench, error)
	// SimSeed seeds the simulated bench's noise (same seed, same scan).
	SimSeed uint64
	// SimSpeed > 1 runs the simulated bench faster than real time.
	SimSpeed float64
	// SimInstant makes the simulated instruments take no time at all.
	SimInstant bool
	// SimQuiet turns the simulated laser's power noise and the power
	// meter's reading noise off: repeated settings then give repeated
	// optical states, which the simulated bench computes once (benchmarks).
	SimQuiet bool
	// AutoResume queues INTERRUPTED scans again at start.
	AutoResume bool
	Logger     *slog.Logger

	// TLSCertFile and TLSKeyFile (PEM) make the daemon serve TLS. Both or
	// neither.
	TLSCertFile, TLSKeyFile string
	// TokensFile is the bearer-token file (see package auth for its
	// format). Without it every caller may do everything (loopback only).
	TokensFile string
	// Bench, when set, is the bench to run (it wins over BenchFile and the
	// simulated bench); the daemon closes it on Stop.
	Bench *drivers.Bench
	// PointTimeout bounds one point's instrument work (0: the engine's default).
	PointTimeout time.Duration
}

// Daemon is a running glissd.
type Daemon struct {
	Engine *engine.Engine
	Store  *store.Store
	Bench  *drivers.Bench

	log    *slog.Logger
	srv    *grpc.Server
	health *health.Server
	lis    net.Listener

	extra   []func(context.Context) error // stop functions of the services in services.go
	cancel  context.CancelFunc
	engDone chan error
	srvDone chan error
	stop    sync.Once
	stopErr error
}

// IsLoopback reports whether host:port listens on loopback only.
func IsLoopback(addr string) bool {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return false
	}
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

// Start opens everything and serves until Stop.
func Start(ctx context.Context, cfg Config) (*Daemon, error) {
	log := cfg.Logger
	if log == nil {
		log = slog.Default()
	}
	if cfg.Listen == "" {
		cfg.Listen = DefaultListen
	}
	if (cfg.TLSCertFile == "") != (cfg.TLSKeyFile == "") {
		return nil, errors.New("--tls-cert and --tls-key go together: give both PEM files, or neither")
	}
	if !IsLoopback(cfg.Listen) && (cfg.TLSCertFile == "" || cfg.TokensFile == "") {
		var missing []string
		if cfg.TLSCertFile == "" {
			missing = append(missing, "--tls-cert FILE --tls-key FILE")
		}
		if cfg.TokensFile == "" {
			missing = append(missing, "--tokens FILE")
		}
		return nil, fmt.Errorf("--listen %s is not a loopback address: listening beyond this machine needs TLS and bearer tokens; add %s (or listen on 127.0.0.1)", cfg.Listen, strings.Join(missing, " and "))
	}
	var serverOpts []grpc.ServerOption
	if cfg.TLSCertFile != "" {
		cert, err := tls.LoadX509KeyPair(cfg.TLSCertFile, cfg.TLSKeyFile)
		if err != nil {
			return nil, fmt.Errorf("--tls-cert %s --tls-key %s: %w", cfg.TLSCertFile, cfg.TLSKeyFile, err)
		}
		serverOpts = append(serverOpts, grpc.Creds(credentials.NewTLS(&tls.Config{Certificates: []tls.Certificate{cert}, MinVersion: tls.VersionTLS12})))
	}
	var tokens *auth.Tokens
	if cfg.TokensFile != "" {
		var err error
		if tokens, err = auth.LoadTokens(cfg.TokensFile); err != nil {
			return nil, fmt.Errorf("--tokens: %w", err)
		}
	}
	if cfg.DataDir == "" {
		return nil, errors.New("--data: give a directory for the scan store")
	}
	if err := os.MkdirAll(cfg.DataDir, 0o755); err != nil {
		return nil, fmt.Errorf("--data %s: %w", cfg.DataDir, err)
	}
	st, err := store.Open(filepath.Join(cfg.DataDir, "gliss.db"), store.Options{})
	if err != nil {
		return nil, err
	}
	b, err := openBench(ctx, cfg, log)
	if err != nil {
		st.Close()
		return nil, err
	}
	eng := engine.New(b, st, engine.Options{Logger: log, PointTimeout: cfg.PointTimeout})
	if err := eng.Recover(ctx, cfg.AutoResume); err != nil {
		b.Close()
		st.Close()
		return nil, err
	}
	lis, err := net.Listen("tcp", cfg.Listen)
	if err != nil {
		b.Close()
		st.Close()
		return nil, fmt.Errorf("--listen %s: %w", cfg.Listen, err)
	}
	guard := &auth.Guard{Tokens: tokens, Audit: st, Logger: log}
	codec, err := rpc.ServerCodec()
	if err != nil {
		lis.Close()
		b.Close()
		st.Close()
		return nil, err
	}
	srv := grpc.NewServer(append(serverOpts,
		// Point events are encoded once for all watchers of a scan.
		codec,
		// Overnight watches cross lab networks: keep idle links alive.
		grpc.KeepaliveParams(keepalive.ServerParameters{Time: 30 * time.Second, Timeout: 10 * time.Second}),
		grpc.KeepaliveEnforcementPolicy(keepalive.EnforcementPolicy{MinTime: 10 * time.Second, PermitWithoutStream: true}),
		// Every call: token and role checked, operate calls audited.
		grpc.ChainUnaryInterceptor(guard.Unary),
		grpc.ChainStreamInterceptor(guard.Stream),
	)...)
	scans := &rpc.Scans{Engine: eng, SharedEncoding: true}
	glissv1.RegisterScanServiceServer(srv, scans)
	glissv1.RegisterBenchServiceServer(srv, &rpc.Bench{Engine: eng})
	glissv1.RegisterAuditServiceServer(srv, &rpc.Audit{Store: st})
	extra, err := registerServices(ctx, srv, eng, st, scans, cfg)
	if err != nil {
		lis.Close()
		b.Close()
		st.Close()
		return nil, err
	}
	hs := health.NewServer()
	healthpb.RegisterHealthServer(srv, hs)
	hs.SetServingStatus("", healthpb.HealthCheckResponse_SERVING)
	hs.SetServingStatus(glissv1.ScanService_ServiceDesc.ServiceName, healthpb.HealthCheckResponse_SERVING)
	hs.SetServingStatus(glissv1.BenchService_ServiceDesc.ServiceName, healthpb.HealthCheckResponse_SERVING)
	hs.SetServingStatus(glissv1.AuditService_ServiceDesc.ServiceName, healthpb.HealthCheckResponse_SERVING)
	hs.SetServingStatus(glissv1.CalibrationService_ServiceDesc.ServiceName, healthpb.HealthCheckResponse_SERVING)
	hs.SetServingStatus(glissv1.AnalysisService_ServiceDesc.ServiceName, healthpb.HealthCheckResponse_SERVING)
	reflection.Register(srv)

	ectx, cancel := context.WithCancel(context.WithoutCancel(ctx))
	d := &Daemon{Engine: eng, Store: st, Bench: b, log: log, srv: srv, health: hs, lis: lis, extra: extra,
		cancel: cancel, engDone: make(chan error, 1), srvDone: make(chan error, 1)}
	go func() { d.engDone <- eng.Run(ectx) }()
	go func() { d.srvDone <- srv.Serve(lis) }()
	access := "no tokens (loopback only)"
	if tokens != nil {
		access = fmt.Sprintf("%d bearer tokens", tokens.Len())
	}
	log.Info("glissd serving", "listen", lis.Addr().String(), "tls", cfg.TLSCertFile != "", "access", access, "data", cfg.DataDir, "bench", b.Name, "instruments", len(b.Entries))
	return d, nil
}

func openBench(ctx context.Context, cfg Config, log *slog.Logger) (*drivers.Bench, error) {
	if cfg.Bench != nil {
		if err := cfg.Bench.Validate(); err != nil {
			return nil, fmt.Errorf("bench %q: %w", cfg.Bench.Name, err)
		}
		return cfg.Bench, nil
	}
	if cfg.BenchFile != "" {
		if cfg.OpenBench == nil {
			return nil, fmt.Errorf("--bench %s: this build cannot load bench files", cfg.BenchFile)
		}
		b, err := cfg.OpenBench(ctx, cfg.BenchFile)
		if err != nil {
			return nil, fmt.Errorf("--bench %s: %w", cfg.BenchFile, err)
		}
		return b, nil
	}
	o := simbench.Options{Seed: cfg.SimSeed, Speed: cfg.SimSpeed, Instant: cfg.SimInstant, Logger: log}
	if cfg.SimQuiet {
		o.PowerNoiseRel, o.MeterNoiseRel = -1, -1
	}
	b, err := simbench.New(o)
	if err != nil {
		return nil, fmt.Errorf("simulated bench: %w", err)
	}
	if cfg.SimSpeed > 1 {
		b.TimeScale = cfg.SimSpeed
	}
	if cfg.SimInstant {
		b.TimeScale = 1e12
	}
	return b, nil
}

// Addr is the address the daemon listens on.
func (d *Daemon) Addr() string { return d.lis.Addr().String() }

// Stop shuts down gracefully: the health service reports NOT_SERVING, the
// current point is finished and stored, a running scan becomes INTERRUPTED,
// open streams are ended, and the store and instruments are closed.
func (d *Daemon) Stop(ctx context.Context) error {
	d.stop.Do(func() {
		d.health.Shutdown()
		d.cancel()
		var errs []error
		select {
		case err := <-d.engDone:
			if err != nil && !errors.Is(err, context.Canceled) {
				errs = append(errs, fmt.Errorf("engine: %w", err))
			}
		case <-ctx.Done():
			errs = append(errs, fmt.Errorf("engine did not stop in time: %w", ctx.Err()))
		}
		stopped := make(chan struct{})
		go func() { d.srv.GracefulStop(); close(stopped) }()
		select {
		case <-stopped:
		case <-time.After(2 * time.Second):
			d.srv.Stop() // watch streams never end by themselves
		}
		for _, stop := range d.extra {
			if err := stop(ctx); err != nil {
				errs = append(errs, err)
			}
		}
		if err := d.Store.Close(); err != nil {
			errs = append(errs, err)
		}
		if err := d.Bench.Close(); err != nil {
			errs = append(errs, err)
		}
		d.stopErr = errors.Join(errs...)
		d.log.Info("glissd stopped")
	})
	return d.stopErr
}

// Wait blocks until the gRPC server stops serving (after Stop, or on a listener error).
func (d *Daemon) Wait() error { return <-d.srvDone }
