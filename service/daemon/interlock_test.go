package daemon_test

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/calib"
	"github.com/gliss-lab/gliss/service/daemon"
	simbench "github.com/gliss-lab/gliss/sim/bench"
)

// commandLog records every setting that reached a driver.
type commandLog struct {
	mu   sync.Mutex
	cmds []command
}

type command struct {
	role  drivers.Role
	value float64
}

func (l *commandLog) add(r drivers.Role, v float64) {
	l.mu.Lock()
	l.cmds = append(l.cmds, command{r, v})
	l.mu.Unlock()
}

type recStage struct {
	drivers.Stage
	log *commandLog
}

func (s recStage) MoveToMM(ctx context.Context, mm float64) error {
	s.log.add(drivers.RoleStage, mm)
	return s.Stage.MoveToMM(ctx, mm)
}

type recAttenuator struct {
	drivers.Attenuator
	log *commandLog
}

func (a recAttenuator) SetAngleDeg(ctx context.Context, deg float64) error {
	a.log.add(drivers.RoleAttenuator, deg)
	return a.Attenuator.SetAngleDeg(ctx, deg)
}

type recLaser struct {
	drivers.Laser
	log *commandLog
}

func (l recLaser) SetDetuningMeV(ctx context.Context, mev float64) error {
	l.log.add(drivers.RoleLaser, mev)
	return l.Laser.SetDetuningMeV(ctx, mev)
}

type recThermometer struct {
	drivers.Thermometer
	log *commandLog
}

func (t recThermometer) SetSetpointK(ctx context.Context, k float64) error {
	t.log.add(drivers.RoleThermometer, k)
	return t.Thermometer.SetSetpointK(ctx, k)
}

func uniform(rng *rand.Rand, lo, hi float64) float64 { return lo + (hi-lo)*rng.Float64() }

// randomBench is the simulated bench with a random (valid) calibration and
// random soft limits inside the simulated instruments' travel, every
// actuator wrapped in a recorder.
func randomBench(t *testing.T, rng *rand.Rand, log *commandLog) *drivers.Bench {
	t.Helper()
	b, err := simbench.New(simbench.Options{Seed: rng.Uint64(), Instant: true})
	if err != nil {
		t.Fatal(err)
	}
	b.TimeScale = 1e12
	sign := 1
	if rng.IntN(2) == 0 {
		sign = -1
	}
	b.Calibration.Stretcher = calib.Stretcher{
		LinesPerMM: 1800, WavelengthNM: uniform(rng, 770, 800), Littrow: true, Order: 1,
		Passes: []int{2, 4}[rng.IntN(2)], Lever: []float64{1, 2}[rng.IntN(2)], ZeroMM: uniform(rng, 400, 800), Sign: sign,
	}
	pmax := uniform(rng, 50, 400)
	b.Calibration.Attenuator = calib.Malus{PMinUW: uniform(rng, 0.01, 0.5), PMaxUW: pmax, Theta0Deg: uniform(rng, -20, 20)}
	for _, e := range b.Entries {
		switch inst := e.Inst.(type) {
		case drivers.Stage:
			e.Limits.StageMinMM, e.Limits.StageMaxMM = uniform(rng, 0, 500), uniform(rng, 700, 1200)
			e.Inst = recStage{inst, log}
		case drivers.Attenuator:
			e.Limits.AngleMinDeg, e.Limits.AngleMaxDeg = uniform(rng, 0, 100), uniform(rng, 150, 360)
			e.Limits.PowerMaxUW = uniform(rng, 2, pmax)
			e.Inst = recAttenuator{inst, log}
		case drivers.Laser:
			e.Limits.DetuningMinMeV, e.Limits.DetuningMaxMeV = uniform(rng, -2, -0.2), uniform(rng, 0.2, 2)
			e.Inst = recLaser{inst, log}
		case drivers.Thermometer:
			e.Inst = recThermometer{inst, log}
		case drivers.Counter:
			for ch := range e.Limits.CountRateMaxHz {
				e.Limits.CountRateMaxHz[ch] = math.Pow(10, uniform(rng, 3, 7))
			}
		}
	}
	if err := b.Validate(); err != nil {
		t.Fatal(err)
	}
	return b
}

// validSpan is the range of an axis kind the bench allows (roughly: power
// and angle also depend on each other).
func validSpan(b *drivers.Bench, kind glissv1.AxisKind) (lo, hi float64) {
	st, at, la := b.ByRole(drivers.RoleStage).Limits, b.ByRole(drivers.RoleAttenuator).Limits, b.ByRole(drivers.RoleLaser).Limits
	switch kind {
	case glissv1.AxisKind_AXIS_KIND_GDD_PS2:
		g1, _ := b.Calibration.Stretcher.GDDPS2(st.StageMinMM)
		g2, _ := b.Calibration.Stretcher.GDDPS2(st.StageMaxMM)
		return math.Min(g1, g2), math.Max(g1, g2)
	case glissv1.AxisKind_AXIS_KIND_STAGE_MM:
		return st.StageMinMM, st.StageMaxMM
	case glissv1.AxisKind_AXIS_KIND_POWER_UW:
		return b.Calibration.Attenuator.PMinUW, math.Min(at.PowerMaxUW, b.Calibration.Attenuator.PMaxUW)
	case glissv1.AxisKind_AXIS_KIND_ANGLE_DEG:
		return at.AngleMinDeg, at.AngleMaxDeg
	}
	return la.DetuningMinMeV, la.DetuningMaxMeV
}

// randomAxis draws an axis over the whole plausible span of its kind, or
// (inside) within what the bench allows.
func randomAxis(rng *rand.Rand, b *drivers.Bench, inside bool) *glissv1.Axis {
	n := uint32(1 + rng.IntN(6))
	var kind glissv1.AxisKind
	var lo, hi float64
	switch rng.IntN(5) {
	case 0:
		kind, lo, hi = glissv1.AxisKind_AXIS_KIND_GDD_PS2, -60, 60
	case 1:
		kind, lo, hi = glissv1.AxisKind_AXIS_KIND_STAGE_MM, -100, 1300
	case 2:
		kind, lo, hi = glissv1.AxisKind_AXIS_KIND_POWER_UW, -10, 450
	case 3:
		kind, lo, hi = glissv1.AxisKind_AXIS_KIND_ANGLE_DEG, -30, 400
	default:
		kind, lo, hi = glissv1.AxisKind_AXIS_KIND_DETUNING_MEV, -3, 3
	}
	if inside {
		lo, hi = validSpan(b, kind)
	}
	if rng.IntN(3) == 0 {
		vals := make([]float64, n)
		for i := range vals {
			vals[i] = uniform(rng, lo, hi)
		}
		return client.Axis(kind, client.List(vals...))
	}
	a := client.Axis(kind, client.Range(uniform(rng, lo, hi), uniform(rng, lo, hi), n))
	if kind == glissv1.AxisKind_AXIS_KIND_POWER_UW && rng.IntN(2) == 0 {
		a.Spacing = glissv1.PowerSpacing_POWER_SPACING_AMPLITUDE
	}
	return a
}

func randomSpec(rng *rand.Rand, b *drivers.Bench) *glissv1.ScanSpec {
	inside := rng.IntN(4) != 0
	axes := []*glissv1.Axis{randomAxis(rng, b, inside)}
	if rng.IntN(2) == 0 {
		axes = append(axes, randomAxis(rng, b, inside))
	}
	spec := client.Options{GateMS: 1, Snake: rng.IntN(2) == 0}.Spec(axes...)
	if rng.IntN(3) == 0 {
		spec.Fixed = append(spec.Fixed, client.Fixed(glissv1.AxisKind_AXIS_KIND_DETUNING_MEV, uniform(rng, -3, 3)))
	}
	return spec
}

func randomSet(rng *rand.Rand) *glissv1.SetInstrumentRequest {
	switch rng.IntN(5) {
	case 0:
		return &glissv1.SetInstrumentRequest{Name: simbench.NameStage, Target: &glissv1.SetInstrumentRequest_StageMm{StageMm: uniform(rng, -100, 1300)}}
	case 1:
		return &glissv1.SetInstrumentRequest{Name: simbench.NameStage, Target: &glissv1.SetInstrumentRequest_GddPs2{GddPs2: uniform(rng, -60, 60)}}
	case 2:
		return &glissv1.SetInstrumentRequest{Name: simbench.NameAttenuator, Target: &glissv1.SetInstrumentRequest_AngleDeg{AngleDeg: uniform(rng, -30, 400)}}
	case 3:
		return &glissv1.SetInstrumentRequest{Name: simbench.NameAttenuator, Target: &glissv1.SetInstrumentRequest_PowerUw{PowerUw: uniform(rng, -10, 450)}}
	}
	return &glissv1.SetInstrumentRequest{Name: simbench.NameLaser, Target: &glissv1.SetInstrumentRequest_DetuningMev{DetuningMev: uniform(rng, -3, 3)}}
}

// TestInterlockProperty: over random benches (calibrations and soft
// limits), random scan specs and random manual commands, nothing outside
// the stage, angle, power and detuning limits ever reaches a driver —
// including the attenuator moves of the count-rate and power interlocks.
func TestInterlockProperty(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 20261202))
	trials := 40
	var accepted, rejected, tripped, moves, setsOK, setsRefused int
	for trial := 0; trial < trials; trial++ {
		log := &commandLog{}
		b := randomBench(t, rng, log)
		limits := map[drivers.Role]drivers.Limits{}
		for _, e := range b.Entries {
			limits[e.Role] = e.Limits
		}
		cal := b.Calibration
		func() {
			_, c := startDaemon(t, daemon.Config{Bench: b})
			ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
			defer cancel()
			for i := 0; i < 6; i++ {
				if _, err := c.Bench.SetInstrument(ctx, randomSet(rng)); err == nil {
					setsOK++
				} else if status.Code(err) == codes.InvalidArgument {
					setsRefused++
				} else {
					t.Errorf("trial %d: set instrument: %v", trial, err)
				}
				sc, err := c.Submit(ctx, randomSpec(rng, b))
				if status.Code(err) == codes.InvalidArgument {
					rejected++
					if testing.Verbose() && rejected < 15 {
						t.Logf("rejected: %v", status.Convert(err).Message())
					}
					continue
				}
				if err != nil {
					t.Fatalf("trial %d: submit: %v", trial, err)
				}
				accepted++
				for ev, err := range c.Watch(ctx, sc.Id, 0) {
					if err != nil {
						t.Fatalf("trial %d: watch: %v", trial, err)
					}
					if s := ev.GetScan(); s != nil && s.State == glissv1.ScanState_SCAN_STATE_PAUSED {
						if !strings.HasPrefix(s.Reason, "interlock:") {
							t.Errorf("trial %d: scan paused: %s", trial, s.Reason)
						} else if !strings.Contains(s.Reason, "attenuator set to its minimum") {
							t.Errorf("trial %d: interlock without the attenuator at its minimum: %s", trial, s.Reason)
						}
						tripped++
						if _, err := c.Scans.CancelScan(ctx, &glissv1.CancelScanRequest{Id: sc.Id, Reason: "interlock seen"}); err != nil {
							t.Fatalf("trial %d: cancel: %v", trial, err)
						}
					}
				}
			}
		}()
		log.mu.Lock()
		for _, cmd := range log.cmds {
			moves++
			l := limits[cmd.role]
			var bad string
			switch cmd.role {
			case drivers.RoleStage:
				if !(cmd.value >= l.StageMinMM && cmd.value <= l.StageMaxMM) {
					bad = fmt.Sprintf("stage to %.6g mm outside %g–%g", cmd.value, l.StageMinMM, l.StageMaxMM)
				}
			case drivers.RoleAttenuator:
				if !(cmd.value >= l.AngleMinDeg && cmd.value <= l.AngleMaxDeg) {
					bad = fmt.Sprintf("attenuator to %.6g° outside %g–%g", cmd.value, l.AngleMinDeg, l.AngleMaxDeg)
				} else if p := cal.Attenuator.PowerUW(cmd.value); p > l.PowerMaxUW*(1+1e-9) {
					bad = fmt.Sprintf("attenuator to %.6g° gives %.6g µW above the maximum %g", cmd.value, p, l.PowerMaxUW)
				}
			case drivers.RoleLaser:
				if !(cmd.value >= l.DetuningMinMeV && cmd.value <= l.DetuningMaxMeV) {
					bad = fmt.Sprintf("laser to %.6g meV outside %g to %g", cmd.value, l.DetuningMinMeV, l.DetuningMaxMeV)
				}
			case drivers.RoleThermometer:
				if !(cmd.value >= l.TemperatureMinK && cmd.value <= l.TemperatureMaxK) {
					bad = fmt.Sprintf("thermometer setpoint %.6g K outside %g–%g", cmd.value, l.TemperatureMinK, l.TemperatureMaxK)
				}
			}
			if bad != "" {
				t.Errorf("trial %d: reached the driver: %s", trial, bad)
			}
		}
		log.mu.Unlock()
	}
	t.Logf("%d trials: %d scans accepted, %d rejected at submission, %d interlock trips, %d manual sets done, %d refused, %d commands checked",
		trials, accepted, rejected, tripped, setsOK, setsRefused, moves)
	// The property means something only if every path was taken.
	if accepted < 10 || rejected < 10 || tripped < 3 || setsOK < 10 || setsRefused < 10 || moves < 200 {
		t.Errorf("too few cases of some kind: accepted %d, rejected %d, tripped %d, sets %d/%d, commands %d", accepted, rejected, tripped, setsOK, setsRefused, moves)
	}
}
