package daemon

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"slices"
	"sync"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/calib"
	"github.com/gliss-lab/gliss/service/engine"
	"github.com/gliss-lab/gliss/service/rpc"
	"github.com/gliss-lab/gliss/service/store"
	simbench "github.com/gliss-lab/gliss/sim/bench"
	"github.com/gliss-lab/gliss/sim/cryostat"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// registerServices registers the gRPC services beyond BenchService and
// ScanService (calibration, analysis, replay) on srv. It returns the stop
// functions the daemon calls, in order, after the engine has stopped and
// before the store closes.
//
// Calibration: the CalibrationService owns the bench's calibration set in
// use. At start it applies the newest stored version to the bench
// (drivers.Bench.SetCalibration, a mutex-guarded swap); the engine plans
// every submission with Bench.CurrentCalibration (through sweep.New) and
// records the service's current record in the scan (SetCalibrationSource).
// A put stores the version first, then swaps it in, so a scan never records
// a version the store lacks.
func registerServices(ctx context.Context, srv *grpc.Server, eng *engine.Engine, st *store.Store, scans *rpc.Scans, cfg Config) ([]func(context.Context) error, error) {
	cals, err := rpc.NewCalibrations(eng, st)
	if err != nil {
		return nil, err
	}
	eng.SetCalibrationSource(cals.Current)
	glissv1.RegisterCalibrationServiceServer(srv, cals)

	log := cfg.Logger
	if log == nil {
		log = slog.Default()
	}
	// A simulated daemon's own noise settings carry over to its replays
	// (the scan record does not say whether the noise was off).
	quiet := cfg.BenchFile == "" && cfg.SimQuiet
	rp := &replayer{store: st, log: log, quiet: quiet, runs: map[string]replayRun{}}
	glissv1.RegisterAnalysisServiceServer(srv, &rpc.Analysis{Store: st, Replay: rp.replay})
	// A live replay is paused, resumed and cancelled through ScanService
	// like any scan: its own engine does it.
	scans.Route = rp.control
	return []func(context.Context) error{rp.stop}, nil
}

// replayer runs replays. Each replay gets a fresh simulated bench seeded
// with the original's seed, whose calibration in use is the set the
// original recorded, and its own engine on the daemon's store: the same
// spec, seed and calibration then give the same command sequence per
// instrument and so the same counts bit for bit (sim/bench), whatever the
// daemon's own bench (simulated or real) has done since. The replay
// bench is instantaneous (no waiting for motion or gates). The replay
// engine stops, and its bench closes, when the scan ends.
type replayer struct {
	store *store.Store
	log   *slog.Logger
	quiet bool // simulated laser and power meter without noise (glissd --sim-quiet)

	mu      sync.Mutex
	runs    map[string]replayRun // live replays by new scan id
	wg      sync.WaitGroup
	stopped bool
}

// replayRun is a live replay: its engine and how to stop it.
type replayRun struct {
	eng    *engine.Engine
	cancel context.CancelFunc
}

// control is the engine of live replay id (nil: not a live replay).
func (r *replayer) control(id string) rpc.ScanControl {
	r.mu.Lock()
	defer r.mu.Unlock()
	if run, ok := r.runs[id]; ok {
		return run.eng
	}
	return nil
}

// replayPoll is how often a replay engine is asked whether its scan ended.
const replayPoll = 20 * time.Millisecond

func (r *replayer) replay(ctx context.Context, orig *glissv1.Scan) (*glissv1.Scan, error) {
	o := simbench.Options{Seed: orig.GetSimSeed(), Instant: true}
	if r.quiet {
		o.PowerNoiseRel, o.MeterNoiseRel = -1, -1
	}
	if k, ok, err := r.sampleTemperatureK(ctx, orig); err != nil {
		return nil, err
	} else if ok {
		// The simulated cryostat's range, widened to hold k if need be.
		d := cryostat.Demo()
		o.Cryostat.MinK, o.Cryostat.MaxK, o.Cryostat.InitialK = min(d.MinK, k), max(d.MaxK, k), k
	}
	b, err := simbench.New(o)
	if err != nil {
		return nil, fmt.Errorf("replay of %s: simulated bench: %w", orig.GetId(), err)
	}
	b.TimeScale = 1e12
	if js := orig.GetCalibration().GetSetJson(); js != "" {
		set, err := calib.DecodeSet([]byte(js))
		if err != nil {
			b.Close()
			return nil, fmt.Errorf("replay of %s: recorded calibration (version %d): %w", orig.GetId(), orig.GetCalibration().GetVersion(), err)
		}
		b.SetCalibration(drivers.CalibrationFromSet(set, b.Calibration))
	}
	eng := engine.New(b, r.store, engine.Options{Logger: r.log.With("replay_of", orig.GetId())})

	r.mu.Lock()
	if r.stopped {
		r.mu.Unlock()
		b.Close()
		return nil, fmt.Errorf("replay of %s: glissd is stopping: %w", orig.GetId(), drivers.ErrUnavailable)
	}
	rctx, cancel := context.WithCancel(context.Background())
	r.wg.Add(1)
	r.mu.Unlock()

	runDone := make(chan error, 1)
	go func() { runDone <- eng.Run(rctx) }()
	sc, err := eng.SubmitWith(ctx, orig.GetSpec(), engine.SubmitOptions{ReplayOf: orig.GetId(), Calibration: orig.GetCalibration()})
	if err != nil {
		cancel()
		<-runDone
		b.Close()
		r.wg.Done()
		return nil, err
	}
	r.mu.Lock()
	r.runs[sc.GetId()] = replayRun{eng: eng, cancel: cancel}
	if r.stopped {
		cancel()
	}
	r.mu.Unlock()
	go func() {
		defer r.wg.Done()
		t := time.NewTicker(replayPoll)
		defer t.Stop()
	wait:
		for {
			select {
			case <-rctx.Done():
				break wait
			case <-t.C:
				cur, err := eng.Get(sc.GetId())
				if err != nil {
					r.log.Error("replay: read scan", "scan", sc.GetId(), "err", err)
					break wait
				}
				if s := cur.GetState(); s == glissv1.ScanState_SCAN_STATE_SUCCEEDED || s == glissv1.ScanState_SCAN_STATE_FAILED || s == glissv1.ScanState_SCAN_STATE_CANCELLED {
					break wait
				}
			}
		}
		cancel()
		if err := <-runDone; err != nil && !errors.Is(err, context.Canceled) {
			r.log.Error("replay engine", "scan", sc.GetId(), "err", err)
		}
		if err := b.Close(); err != nil {
			r.log.Error("replay bench: close", "scan", sc.GetId(), "err", err)
		}
		r.mu.Lock()
		delete(r.runs, sc.GetId())
		r.mu.Unlock()
	}()
	r.log.Info("replay queued", "scan", sc.GetId(), "replay_of", orig.GetId(), "seed", orig.GetSimSeed(), "calibration_version", orig.GetCalibration().GetVersion())
	return sc, nil
}

// replayTemperatureReadings is how many of the original's first points
// sampleTemperatureK reads (at most).
const replayTemperatureReadings = 16

// sampleTemperatureK is the sample temperature a replay's simulated
// cryostat starts at, when it is not the simulator's own start (ok false).
// A scan that sets the temperature itself (a temperature axis or a fixed
// setpoint) is replayed the same way: the replay's engine sets it. A scan
// of the simulated bench started at the simulator's start temperature, so
// its replay does too (and gives the same counts bit for bit). A scan of
// real instruments with a thermometer recorded the sample's temperature:
// its replay starts at the median of the first readings, to 0.01 K, so the
// model's phonons see the temperature the sample had; it must be within the
// phonon model's range, above 0 K (FailedPrecondition otherwise).
func (r *replayer) sampleTemperatureK(ctx context.Context, orig *glissv1.Scan) (float64, bool, error) {
	if orig.GetSimSeed() != 0 {
		return 0, false, nil
	}
	for _, a := range orig.GetSpec().GetAxes() {
		if a.GetKind() == glissv1.AxisKind_AXIS_KIND_TEMPERATURE_K {
			return 0, false, nil
		}
	}
	for _, f := range orig.GetSpec().GetFixed() {
		if f.GetKind() == glissv1.AxisKind_AXIS_KIND_TEMPERATURE_K {
			return 0, false, nil
		}
	}
	var ks []float64
	read := 0
	errEnough := errors.New("enough points")
	err := r.store.ReadPoints(ctx, orig.GetId(), 0, func(p *glissv1.Point) error {
		if p.TemperatureK != nil {
			ks = append(ks, p.GetTemperatureK())
		}
		// every point of a bench with a thermometer has a reading
		if read++; read == replayTemperatureReadings {
			return errEnough
		}
		return nil
	})
	if err != nil && !errors.Is(err, errEnough) {
		return 0, false, fmt.Errorf("replay of %s: read its sample temperatures: %w", orig.GetId(), err)
	}
	if len(ks) == 0 {
		return 0, false, nil // no thermometer: the simulator's start temperature
	}
	slices.Sort(ks)
	k := ks[len(ks)/2]
	if len(ks)%2 == 0 {
		k = (ks[len(ks)/2-1] + k) / 2
	}
	k = math.Round(k*100) / 100
	if !(k > 0 && k <= phonon.MaxTemperatureK) {
		return 0, false, status.Errorf(codes.FailedPrecondition,
			"replay of %s: its sample was at %.2f K (median of the first %d readings); the simulator models 0.01–%g K",
			orig.GetId(), k, len(ks), phonon.MaxTemperatureK)
	}
	return k, true, nil
}

// stop ends every live replay (a running one becomes INTERRUPTED, as on
// the daemon's own engine) and waits for their engines.
func (r *replayer) stop(ctx context.Context) error {
	r.mu.Lock()
	r.stopped = true
	for _, run := range r.runs {
		run.cancel()
	}
	r.mu.Unlock()
	done := make(chan struct{})
	go func() { r.wg.Wait(); close(done) }()
	select {
	case <-done:
		return nil
	case <-ctx.Done():
		return fmt.Errorf("replays did not stop in time: %w", ctx.Err())
	}
}
