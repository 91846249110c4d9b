package bench

import (
	"context"
	"errors"
	"math"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/calib"
	"github.com/gliss-lab/gliss/sim/detection"
	"github.com/gliss-lab/gliss/sim/model"
	"github.com/gliss-lab/gliss/sim/phonon"
)

func newBench(t testing.TB, o Options) *drivers.Bench {
	t.Helper()
	b, err := New(o)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { b.Close() })
	return b
}

func TestNewBench(t *testing.T) {
	b := newBench(t, Options{Seed: 7, Instant: true})
	if b.Name != "sim" || b.SimSeed != 7 {
		t.Errorf("Name %q SimSeed %d, want sim 7", b.Name, b.SimSeed)
	}
	if err := b.Validate(); err != nil {
		t.Fatal(err)
	}
	if b.Stage() == nil || b.Attenuator() == nil || b.PowerMeter() == nil || b.Laser() == nil || b.Counter() == nil || b.Thermometer() == nil {
		t.Fatal("a role is missing")
	}
	if b.Calibration.Stretcher != DemoStretcher() || b.Calibration.Attenuator != DemoAttenuator() {
		t.Errorf("calibration %+v is not the nominal demo calibration", b.Calibration)
	}
	lim := b.ByRole(drivers.RoleStage).Limits
	if lim.StageMinMM != 0 || lim.StageMaxMM != 1200 || lim.StageSpeedMMPerS != 25 || lim.StageAccelMMPerS2 != 50 {
		t.Errorf("stage limits %+v", lim)
	}
	// The demo cryostat's range (sim/cryostat.Demo): base 1.5 K, top 300 K.
	if lim := b.ByRole(drivers.RoleThermometer).Limits; lim.TemperatureMinK != 1.5 || lim.TemperatureMaxK != 300 || Limits(drivers.RoleThermometer).TemperatureMaxK != 300 {
		t.Errorf("thermometer limits %+v", lim)
	}
	if _, ok := b.Thermometer().(drivers.Stabilizer); !ok {
		t.Error("the thermometer cannot wait for a stable temperature (no drivers.Stabilizer)")
	}
	if got := b.ByRole(drivers.RoleCounter).Limits.CountRateMaxHz; got["x"] <= 0 || got["xx"] <= 0 {
		t.Errorf("counter ceiling %v", got)
	}
	want := map[drivers.Role]string{
		drivers.RoleStage: "gliss sim stage v1", drivers.RoleAttenuator: "gliss sim attenuator v1",
		drivers.RolePowerMeter: "gliss sim powermeter v1", drivers.RoleLaser: "gliss sim laser v1",
		drivers.RoleCounter: "gliss sim counter v1", drivers.RoleThermometer: "gliss sim thermometer v1",
	}
	for _, e := range b.Entries {
		id, ok := e.Inst.(drivers.Identifier)
		if !ok {
			t.Fatalf("%s: no Identifier", e.Name)
		}
		s, err := id.Identify(context.Background())
		if err != nil || s != want[e.Role] {
			t.Errorf("%s: Identify = %q, %v; want %q", e.Name, s, err, want[e.Role])
		}
	}
	if got := b.Counter().Channels(); len(got) != 2 || got[0] != "x" || got[1] != "xx" {
		t.Errorf("channels %v", got)
	}
}

// The demo stretcher's slope and range: 0.04433 ps²/mm, ±26.6 ps² over
// 0..1200 mm (PHYSICS.md, demo stretcher; Treacy 1969 / Martinez 1987 formula).
func TestDemoCalibrations(t *testing.T) {
	s := DemoStretcher()
	k, err := s.SlopePS2PerMM()
	if err != nil || math.Abs(k-0.04433) > 0.000005 {
		t.Errorf("slope %g ps²/mm (%v), want 0.04433", k, err)
	}
	lo, _ := s.GDDPS2(0)
	hi, _ := s.GDDPS2(1200)
	if math.Abs(lo+26.6) > 0.05 || math.Abs(hi-26.6) > 0.05 {
		t.Errorf("GDD over the travel %g..%g ps², want ±26.6", lo, hi)
	}
	m := DemoAttenuator()
	if p := m.PowerUW(0); p != 200 {
		t.Errorf("attenuator at 0°: %g µW, want 200", p)
	}
	if p := m.PowerUW(45); math.Abs(p-0.05) > 1e-12 {
		t.Errorf("attenuator at 45°: %g µW, want the 0.05 µW floor", p)
	}
}

func TestOptionsRejected(t *testing.T) {
	for _, o := range []Options{
		{Speed: -1}, {Speed: math.NaN()}, {Speed: math.Inf(1)},
		{PowerNoiseRel: math.NaN()}, {MeterNoiseRel: 2},
		{CouplingUWPerPi2: -1},
		{Chain: detection.Chain{RepRateHz: 80e6, Efficiency: []float64{0.01}}},
		{Chain: detection.Chain{RepRateHz: 80e6, Efficiency: []float64{0.01, 1.5}}},
		{Dot: model.Params{FWHMPS: 0.001, BindingMeV: 4, AreaPi: 1}},
		{CouplingUWPerPi2: 0.05}, // 200 µW → 63π, beyond the model
		{Stretcher: calib.Stretcher{LinesPerMM: 1800, WavelengthNM: 785, Littrow: true, Passes: 400, Lever: 2, ZeroMM: 600}}, // ±2660 ps²
	} {
		if b, err := New(o); err == nil {
			b.Close()
			t.Errorf("New(%+v) accepted", o)
		} else if !strings.Contains(err.Error(), "Options.") {
			t.Errorf("New(%+v): error %q does not name the field", o, err)
		}
	}
}

// Out-of-travel requests are refused with drivers.ErrLimit and nothing moves.
func TestLimitsRefusedWithoutMotion(t *testing.T) {
	ctx := context.Background()
	b := newBench(t, Options{Seed: 1, Instant: true})
	st, at, la := b.Stage(), b.Attenuator(), b.Laser()
	for _, mm := range []float64{-0.001, 1200.001, math.NaN(), math.Inf(-1), 5000} {
		err := st.MoveToMM(ctx, mm)
		if !errors.Is(err, drivers.ErrLimit) {
			t.Errorf("MoveToMM(%g): %v, want ErrLimit", mm, err)
		} else if !strings.Contains(err.Error(), "position_mm") || !strings.Contains(err.Error(), "[0, 1200] mm") {
			t.Errorf("MoveToMM(%g): error %q does not name the field and range", mm, err)
		}
		if p, _ := st.PositionMM(ctx); p != stageStartMM {
			t.Fatalf("stage moved to %g on a refused move", p)
		}
	}
	if err := at.SetAngleDeg(ctx, 360.5); !errors.Is(err, drivers.ErrLimit) {
		t.Errorf("SetAngleDeg(360.5): %v", err)
	}
	if a, _ := at.AngleDeg(ctx); a != angleStartDeg {
		t.Errorf("attenuator moved to %g", a)
	}
	if err := la.SetDetuningMeV(ctx, -2.01); !errors.Is(err, drivers.ErrLimit) {
		t.Errorf("SetDetuningMeV(-2.01): %v", err)
	}
	if d, _ := la.DetuningMeV(ctx); d != 0 {
		t.Errorf("laser tuned to %g", d)
	}
	for _, g := range []time.Duration{0, -time.Second, 2 * time.Hour} {
		if _, err := b.Counter().Count(ctx, g); !errors.Is(err, drivers.ErrLimit) || !strings.Contains(err.Error(), "gate_ms") {
			t.Errorf("Count(%v): %v, want ErrLimit naming gate_ms", g, err)
		}
	}
	// The ends of the travel are inside it.
	for _, mm := range []float64{0, 1200} {
		if err := st.MoveToMM(ctx, mm); err != nil {
			t.Errorf("MoveToMM(%g): %v", mm, err)
		}
		if p, _ := st.PositionMM(ctx); p < 0 || p > 1200 || math.Abs(p-mm) > 5*stageRepeatMM {
			t.Errorf("MoveToMM(%g) arrived at %g", mm, p)
		}
	}
}

// Arrival positions scatter with the stage's 1 µm repeatability.
func TestStageRepeatability(t *testing.T) {
	ctx := context.Background()
	st := newBench(t, Options{Seed: 3, Instant: true}).Stage()
	var sum, sum2 float64
	const n = 400
	for i := range n {
		far := 100.0
		if i%2 == 1 {
			far = 900
		}
		if err := st.MoveToMM(ctx, far); err != nil {
			t.Fatal(err)
		}
		if err := st.MoveToMM(ctx, 500); err != nil {
			t.Fatal(err)
		}
		p, _ := st.PositionMM(ctx)
		sum += p - 500
		sum2 += (p - 500) * (p - 500)
	}
	mean := sum / n
	sd := math.Sqrt(sum2/n - mean*mean)
	// σ 1 µm: the sample σ of 400 draws is within ±20 % with overwhelming
	// probability (its relative sd is 1/sqrt(2n) = 3.5 %).
	if sd < 0.8e-3 || sd > 1.2e-3 || math.Abs(mean) > 0.25e-3 {
		t.Errorf("arrival scatter mean %g mm sd %g mm, want 0 and 0.001", mean, sd)
	}
}

// A scaled move takes about MoveDurationMM/Speed of wall time, and the
// position read from another goroutine during the move is interpolated.
func TestScaledMoveTakesItsTime(t *testing.T) {
	ctx := context.Background()
	st := newBench(t, Options{Seed: 1, Speed: 100}).Stage()
	want := MoveDurationMM(600, 0) / 100 // 245 ms
	var seen []float64
	done := make(chan struct{})
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		for {
			select {
			case <-done:
				return
			case <-time.After(5 * time.Millisecond):
			}
			p, err := st.PositionMM(ctx)
			if err != nil {
				t.Error(err)
				return
			}
			seen = append(seen, p)
		}
	}()
	start := time.Now()
	if err := st.MoveToMM(ctx, 0); err != nil {
		t.Fatal(err)
	}
	elapsed := time.Since(start)
	close(done)
	wg.Wait()
	// Sleeping never ends early; the upper bound is loose for a loaded machine.
	if elapsed < want-time.Millisecond || elapsed > want+3*time.Second {
		t.Errorf("600 mm at Speed 100 took %v, want about %v", elapsed, want)
	}
	inside := 0
	for i, p := range seen {
		if p < -0.01 || p > 600 {
			t.Fatalf("position %g outside the move", p)
		}
		if i > 0 && p > seen[i-1] {
			t.Fatalf("position went back: %g after %g", p, seen[i-1])
		}
		if p > 1 && p < 599 {
			inside++
		}
	}
	if inside < 3 {
		t.Errorf("only %d of %d readings during the move were between the ends: %v", inside, len(seen), seen)
	}
	if p, _ := st.PositionMM(ctx); math.Abs(p) > 5*stageRepeatMM {
		t.Errorf("arrived at %g, want 0", p)
	}
}

// Cancelling a move stops the stage where it is.
func TestCancelledMoveStops(t *testing.T) {
	st := newBench(t, Options{Seed: 1, Speed: 10}).Stage()
	ctx, cancel := context.WithTimeout(context.Background(), 300*time.Millisecond)
	defer cancel()
	start := time.Now()
	err := st.MoveToMM(ctx, 1200) // 24.5 s / 10 = 2.45 s
	if !errors.Is(err, context.DeadlineExceeded) {
		t.Fatalf("cancelled move: %v, want DeadlineExceeded", err)
	}
	if el := time.Since(start); el > 2*time.Second {
		t.Errorf("cancel took %v to act", el)
	}
	bg := context.Background()
	p1, _ := st.PositionMM(bg)
	if p1 <= 600 || p1 >= 1200 {
		t.Fatalf("stopped at %g, want strictly between 600 and 1200", p1)
	}
	time.Sleep(30 * time.Millisecond)
	if p2, _ := st.PositionMM(bg); p2 != p1 {
		t.Errorf("stage still moving after cancel: %g then %g", p1, p2)
	}
	// A move with a dead context does nothing.
	dead, c2 := context.WithCancel(bg)
	c2()
	if err := st.MoveToMM(dead, 0); !errors.Is(err, context.Canceled) {
		t.Errorf("move on a cancelled context: %v", err)
	}
	if p3, _ := st.PositionMM(bg); p3 != p1 {
		t.Errorf("stage moved on a cancelled context: %g", p3)
	}
}

// A second move while one is in flight is refused, and the first goes on.
func TestBusyStage(t *testing.T) {
	st := newBench(t, Options{Speed: 100}).Stage()
	ctx := context.Background()
	errc := make(chan error, 1)
	go func() { errc <- st.MoveToMM(ctx, 0) }()
	time.Sleep(40 * time.Millisecond)
	if err := st.MoveToMM(ctx, 1000); err == nil || !strings.Contains(err.Error(), "busy") {
		t.Errorf("second move during a move: %v, want busy", err)
	}
	if err := <-errc; err != nil {
		t.Fatal(err)
	}
	if p, _ := st.PositionMM(ctx); math.Abs(p) > 0.01 {
		t.Errorf("first move ended at %g", p)
	}
}

type run struct {
	counts [][]uint64
	powers []float64
	pos    []float64
}

// script runs a fixed command sequence on a bench; parallel drives the
// power meter in its own goroutine at the same time as the counter.
func script(t *testing.T, b *drivers.Bench, parallel bool) run {
	t.Helper()
	ctx := context.Background()
	var r run
	for i, mm := range []float64{600, 1051.2, 300} {
		if err := b.Stage().MoveToMM(ctx, mm); err != nil {
			t.Fatal(err)
		}
		if err := b.Attenuator().SetAngleDeg(ctx, 10+5*float64(i)); err != nil {
			t.Fatal(err)
		}
		if err := b.Laser().SetDetuningMeV(ctx, 0.1*float64(i)); err != nil {
			t.Fatal(err)
		}
		p, _ := b.Stage().PositionMM(ctx)
		r.pos = append(r.pos, p)
		var wg sync.WaitGroup
		var pw []float64
		readPower := func() {
			defer wg.Done()
			for range 3 {
				v, err := b.PowerMeter().PowerUW(ctx)
				if err != nil {
					t.Error(err)
				}
				pw = append(pw, v)
			}
		}
		wg.Add(1)
		if parallel {
			go readPower()
		} else {
			readPower()
		}
		for range 3 {
			c, err := b.Counter().Count(ctx, 100*time.Millisecond)
			if err != nil {
				t.Fatal(err)
			}
			r.counts = append(r.counts, c)
		}
		wg.Wait()
		r.powers = append(r.powers, pw...)
	}
	return r
}

func sameRun(a, b run) bool {
	if len(a.counts) != len(b.counts) || len(a.powers) != len(b.powers) {
		return false
	}
	for i := range a.counts {
		for j := range a.counts[i] {
			if a.counts[i][j] != b.counts[i][j] {
				return false
			}
		}
	}
	for i := range a.powers {
		if a.powers[i] != b.powers[i] {
			return false
		}
	}
	for i := range a.pos {
		if a.pos[i] != b.pos[i] {
			return false
		}
	}
	return true
}

// Same seed and commands give the same numbers bit for bit, whether the
// power meter and counter are driven one after the other or in parallel,
// and at any time scale; another seed gives other numbers.
func TestDeterminism(t *testing.T) {
	a := script(t, newBench(t, Options{Seed: 42, Instant: true}), false)
	b := script(t, newBench(t, Options{Seed: 42, Instant: true}), true)
	c := script(t, newBench(t, Options{Seed: 42, Speed: 2000}), true)
	d := script(t, newBench(t, Options{Seed: 43, Instant: true}), false)
	if !sameRun(a, b) {
		t.Errorf("same seed, parallel instruments: different numbers\n%+v\n%+v", a, b)
	}
	if !sameRun(a, c) {
		t.Errorf("same seed, Speed 2000 instead of Instant: different numbers\n%+v\n%+v", a, c)
	}
	if sameRun(a, d) {
		t.Errorf("seeds 42 and 43 gave the same numbers")
	}
	differ := 0
	for i := range a.counts {
		if a.counts[i][1] != d.counts[i][1] {
			differ++
		}
	}
	if differ < len(a.counts)/2 {
		t.Errorf("seeds 42 and 43: only %d of %d xx counts differ", differ, len(a.counts))
	}
}

// modelRates is the independent expectation of the mean count rates at an
// optical state: GDD from the demo stretcher's slope of PHYSICS.md
// (0.04433 ps²/mm about 600 mm), power from Malus's law with the demo
// attenuator (0.05..200 µW, θ0 = 0; Hecht §8.2), Θ = π·sqrt(P/1 µW) (demo
// coupling), then the dot model with the bath (sim/phonon, checked against
// QuTiP's brmesolve there; nil or α = 0: the plain sim/model) and the
// detection chain.
func modelRates(t *testing.T, stageMM, angleDeg, detuningMeV float64, bath *phonon.Bath) []float64 {
	t.Helper()
	slope, _ := DemoStretcher().SlopePS2PerMM() // checked against 0.04433 in TestDemoCalibrations
	c := math.Cos(2 * angleDeg * math.Pi / 180)
	pUW := 0.05 + (200-0.05)*c*c
	p := model.DemoParams()
	p.GDDPS2 = slope * (stageMM - 600)
	p.AreaPi = math.Sqrt(pUW / 1.0)
	p.DetuningMeV = detuningMeV
	r, err := phonon.Solve(p, bath)
	if err != nil {
		t.Fatal(err)
	}
	return detection.Demo().RatesHz([]float64{r.NX, r.NXX})
}

// demoBathAt is the demo dot's phonons (PHYSICS.md §7) with the sample at k.
func demoBathAt(k float64) *phonon.Bath {
	b := phonon.DemoBath()
	b.TemperatureK = k
	return &b
}

// The counter's mean counts agree with the model yields × the detection
// chain within Poisson error at a zero-chirp π pulse, on the 20 ps² plateau
// and detuned: with the demo dot's phonons at the cryostat's 4.2 K (the
// default bench) and without phonons (Options.Bath with α = 0).
func TestCountsFollowModel(t *testing.T) {
	t.Run("phonons at 4.2 K", func(t *testing.T) {
		countsFollowModel(t, newBench(t, Options{Seed: 9, Instant: true, PowerNoiseRel: -1}), demoBathAt(4.2))
	})
	t.Run("no phonons", func(t *testing.T) {
		countsFollowModel(t, newBench(t, Options{Seed: 9, Instant: true, PowerNoiseRel: -1, Bath: &phonon.Bath{}}), nil)
	})
}

func countsFollowModel(t *testing.T, b *drivers.Bench, bath *phonon.Bath) {
	ctx := context.Background()
	angle1uW, err := DemoAttenuator().AngleDeg(1.0) // Θ = π
	if err != nil {
		t.Fatal(err)
	}
	angle100uW, _ := DemoAttenuator().AngleDeg(100) // Θ = 10π
	plateauMM := 600 + 20/0.04433                   // 20 ps² with the PHYSICS.md slope
	for _, c := range []struct {
		name                 string
		mm, deg, detuningMeV float64
	}{
		{"zero chirp, π pulse", 600, angle1uW, 0},
		{"20 ps², 10π plateau", plateauMM, angle100uW, 0},
		{"zero chirp, 2π, detuned +0.3 meV", 600, mustAngle(t, 4), 0.3},
	} {
		if err := b.Stage().MoveToMM(ctx, c.mm); err != nil {
			t.Fatal(err)
		}
		if err := b.Attenuator().SetAngleDeg(ctx, c.deg); err != nil {
			t.Fatal(err)
		}
		if err := b.Laser().SetDetuningMeV(ctx, c.detuningMeV); err != nil {
			t.Fatal(err)
		}
		// Expect at the positions the instruments report (they include the
		// arrival scatter, which is part of the truth).
		mm, _ := b.Stage().PositionMM(ctx)
		deg, _ := b.Attenuator().AngleDeg(ctx)
		det, _ := b.Laser().DetuningMeV(ctx)
		want := modelRates(t, mm, deg, det, bath)
		const n, gate = 40, 500 * time.Millisecond
		sum := make([]float64, 2)
		for range n {
			cnt, err := b.Counter().Count(ctx, gate)
			if err != nil {
				t.Fatal(err)
			}
			for i := range sum {
				sum[i] += float64(cnt[i])
			}
		}
		for i, ch := range []string{"x", "xx"} {
			mu := want[i] * gate.Seconds()
			mean := sum[i] / n
			sigma := math.Sqrt(mu / n)
			if math.Abs(mean-mu) > 4*sigma {
				t.Errorf("%s, %s: mean %g counts per gate, model × chain %g ± %g", c.name, ch, mean, mu, sigma)
			}
		}
		if c.name == "20 ps², 10π plateau" && bath == nil {
			// Without phonons a strongly chirped drive reaches full
			// biexciton population (PHYSICS.md §6, fact of the trade,
			// common practice): the xx rate is near f_rep·η_xx = 400 kHz
			// before dead time. (At 4.2 K the demo phonons take about 10 %
			// of it: phonon.Solve gives n_xx ≈ 0.90.)
			if r := sum[1] / n / gate.Seconds(); r < 0.9*400e3/(1+400e3*25e-9) {
				t.Errorf("plateau xx rate %g /s, want near 400 kHz", r)
			}
		}
	}
}

func mustAngle(t *testing.T, uw float64) float64 {
	a, err := DemoAttenuator().AngleDeg(uw)
	if err != nil {
		t.Fatal(err)
	}
	return a
}

// Laser power noise held for a gate makes the counts super-Poissonian where
// the yield depends on the power: variance ≈ μ + (dμ/dP · σ_P)² (law of total
// variance with first-order propagation of the power noise; common
// practice, no published source).
func TestLaserNoiseBroadensCounts(t *testing.T) {
	ctx := context.Background()
	const sigmaRel = 0.05
	b := newBench(t, Options{Seed: 5, Instant: true, PowerNoiseRel: sigmaRel})
	angle := mustAngle(t, 4) // Θ = 2π at zero chirp: xx yield rising with power
	if err := b.Attenuator().SetAngleDeg(ctx, angle); err != nil {
		t.Fatal(err)
	}
	mm, _ := b.Stage().PositionMM(ctx)
	deg, _ := b.Attenuator().AngleDeg(ctx)
	const gate = 100 * time.Millisecond
	mu := modelRates(t, mm, deg, 0, demoBathAt(4.2))[1] * gate.Seconds()
	// dμ/d(P/P0) by central differences of the model at P0·(1 ± 1 %).
	c := math.Cos(2 * deg * math.Pi / 180)
	p0 := 0.05 + (200-0.05)*c*c
	rate := func(pUW float64) float64 {
		p := model.DemoParams()
		slope, _ := DemoStretcher().SlopePS2PerMM()
		p.GDDPS2 = slope * (mm - 600)
		p.AreaPi = math.Sqrt(pUW)
		r, err := phonon.Solve(p, demoBathAt(4.2)) // the default bench: demo phonons at 4.2 K
		if err != nil {
			t.Fatal(err)
		}
		return detection.Demo().RatesHz([]float64{r.NX, r.NXX})[1] * gate.Seconds()
	}
	dmu := (rate(p0*1.01) - rate(p0*0.99)) / 0.02
	wantVar := mu + dmu*dmu*sigmaRel*sigmaRel
	const n = 300
	var sum, sum2 float64
	for range n {
		cnt, err := b.Counter().Count(ctx, gate)
		if err != nil {
			t.Fatal(err)
		}
		x := float64(cnt[1])
		sum += x
		sum2 += x * x
	}
	mean := sum / n
	v := (sum2 - n*mean*mean) / (n - 1)
	if wantVar < 4*mu {
		t.Fatalf("test point too flat: laser noise adds only %g to a Poisson variance %g", wantVar-mu, mu)
	}
	// The sample variance of 300 gates has a relative sd of about
	// sqrt(2/299) ≈ 8 %; allow 35 %.
	if math.Abs(v-wantVar) > 0.35*wantVar {
		t.Errorf("xx count variance %g, want about %g (Poisson alone %g)", v, wantVar, mu)
	}
	if math.Abs(mean-mu) > 0.05*mu {
		t.Errorf("xx mean %g, want about %g", mean, mu)
	}
}

// The power meter reads the true Malus power with laser and meter noise.
func TestPowerMeterReadsTruePower(t *testing.T) {
	ctx := context.Background()
	b := newBench(t, Options{Seed: 11, Instant: true})
	if err := b.Attenuator().SetAngleDeg(ctx, 30); err != nil {
		t.Fatal(err)
	}
	deg, _ := b.Attenuator().AngleDeg(ctx)
	c := math.Cos(2 * deg * math.Pi / 180)
	want := 0.05 + (200-0.05)*c*c // Malus's law, Hecht §8.2, demo attenuator
	const n = 400
	var sum, sum2 float64
	for range n {
		p, err := b.PowerMeter().PowerUW(ctx)
		if err != nil {
			t.Fatal(err)
		}
		sum += p
		sum2 += p * p
	}
	mean := sum / n
	sd := math.Sqrt((sum2 - n*mean*mean) / (n - 1))
	wantSD := want * math.Hypot(0.01, 0.005) // default laser 1 %, meter 0.5 %
	if math.Abs(mean-want) > 4*wantSD/math.Sqrt(n) {
		t.Errorf("mean reading %g µW, want %g", mean, want)
	}
	if math.Abs(sd-wantSD) > 0.2*wantSD {
		t.Errorf("reading sd %g µW, want %g", sd, wantSD)
	}
	// A different true attenuator law shows in the readings, not in the
	// bench's nominal calibration.
	b2 := newBench(t, Options{Seed: 11, Instant: true, Attenuator: otherMalus(), MeterNoiseRel: -1, PowerNoiseRel: -1})
	if err := b2.Attenuator().SetAngleDeg(ctx, 0); err != nil {
		t.Fatal(err)
	}
	deg2, _ := b2.Attenuator().AngleDeg(ctx)
	p, _ := b2.PowerMeter().PowerUW(ctx)
	if w := otherMalus().PowerUW(deg2); math.Abs(p-w) > 5*meterFloorUW {
		t.Errorf("true law: reading %g µW, want %g", p, w)
	}
	if b2.Calibration.Attenuator != DemoAttenuator() {
		t.Errorf("calibration followed the truth")
	}
}

// otherMalus is a true attenuator law that differs from the nominal one.
func otherMalus() calib.Malus { return calib.Malus{PMinUW: 0.08, PMaxUW: 180, Theta0Deg: 3} }

// Commanding the position an axis already arrived at moves nothing (no new
// repeatability draw, no laser relock); any other target moves again.
func TestSameTargetDoesNotMove(t *testing.T) {
	ctx := context.Background()
	b := newBench(t, Options{Seed: 6, Speed: 1})
	if err := b.Laser().SetDetuningMeV(ctx, 0.01); err != nil { // 5 ms ramp + 50 ms relock
		t.Fatal(err)
	}
	d1, _ := b.Laser().DetuningMeV(ctx)
	start := time.Now()
	if err := b.Laser().SetDetuningMeV(ctx, 0.01); err != nil {
		t.Fatal(err)
	}
	if el := time.Since(start); el > 40*time.Millisecond {
		t.Errorf("re-sending the same detuning took %v (a relock is 50 ms)", el)
	}
	if d2, _ := b.Laser().DetuningMeV(ctx); d2 != d1 {
		t.Errorf("same detuning re-sent: %g then %g", d1, d2)
	}
	bi := newBench(t, Options{Seed: 6, Instant: true})
	if err := bi.Stage().MoveToMM(ctx, 300); err != nil {
		t.Fatal(err)
	}
	p1, _ := bi.Stage().PositionMM(ctx)
	if err := bi.Stage().MoveToMM(ctx, 300); err != nil {
		t.Fatal(err)
	}
	p2, _ := bi.Stage().PositionMM(ctx)
	if err := bi.Stage().MoveToMM(ctx, 300.0001); err != nil {
		t.Fatal(err)
	}
	p3, _ := bi.Stage().PositionMM(ctx)
	if p2 != p1 || p3 == p1 {
		t.Errorf("positions %g, %g (same target), %g (new target)", p1, p2, p3)
	}
}

// CountInto gives the numbers Count gives (same seed, same gates) and, with
// room in dst, keeps them there: no allocation per gate once the yield is
// cached.
func TestCountIntoSameAsCount(t *testing.T) {
	ctx := context.Background()
	a := newBench(t, Options{Seed: 7, Instant: true, PowerNoiseRel: -1}).Counter()
	b := newBench(t, Options{Seed: 7, Instant: true, PowerNoiseRel: -1}).Counter().(drivers.CounterInto)
	var dst [2]uint64
	for i := range 50 {
		want, err := a.Count(ctx, 100*time.Millisecond)
		if err != nil {
			t.Fatal(err)
		}
		got, err := b.CountInto(ctx, 100*time.Millisecond, dst[:0])
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(got, want) || &got[0] != &dst[0] {
			t.Fatalf("gate %d: CountInto %v (in dst: %v), Count %v", i, got, &got[0] == &dst[0], want)
		}
	}
	if n := testing.AllocsPerRun(100, func() {
		if _, err := b.CountInto(ctx, 100*time.Millisecond, dst[:0]); err != nil {
			t.Fatal(err)
		}
	}); n != 0 {
		t.Errorf("CountInto with room in dst: %v allocations per gate, want 0", n)
	}
}
