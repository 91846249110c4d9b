package bench

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/sim/cryostat"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// plateauMM is the stage position of +20 ps² with the PHYSICS.md slope
// (0.04433 ps²/mm about 600 mm).
const plateauMM = 600 + 20/0.04433

// meanXX is the mean xx count of n gates of gate.
func meanXX(t *testing.T, b *drivers.Bench, n int, gate time.Duration) float64 {
	t.Helper()
	var sum float64
	for range n {
		c, err := b.Counter().Count(context.Background(), gate)
		if err != nil {
			t.Fatal(err)
		}
		sum += float64(c[1])
	}
	return sum / float64(n)
}

// settle sets the thermometer to k and waits for ±0.05 K over 30 s (the
// demo cryostat's band, PHYSICS.md demo dot), as the scan engine does.
func settle(t *testing.T, b *drivers.Bench, k float64) {
	t.Helper()
	ctx := context.Background()
	th := b.Thermometer()
	if err := th.SetSetpointK(ctx, k); err != nil {
		t.Fatal(err)
	}
	if err := th.(drivers.Stabilizer).WaitStableK(ctx, k, 0.05, 30*time.Second, 30*time.Minute); err != nil {
		t.Fatal(err)
	}
}

// The counter sees the phonons at the temperature the thermometer sets:
// after a setpoint of 20 K and a stability wait the counts agree with the
// phonon model at the setpoint, and differ
// from those at 4.2 K by far more than the Poisson scatter.
func TestCounterFollowsSampleTemperature(t *testing.T) {
	ctx := context.Background()
	b := newBench(t, Options{Seed: 21, Instant: true, PowerNoiseRel: -1})
	if err := b.Stage().MoveToMM(ctx, plateauMM); err != nil {
		t.Fatal(err)
	}
	if err := b.Attenuator().SetAngleDeg(ctx, mustAngle(t, 64)); err != nil { // Θ = 8π
		t.Fatal(err)
	}
	mm, _ := b.Stage().PositionMM(ctx)
	deg, _ := b.Attenuator().AngleDeg(ctx)
	const n, gate = 20, 200 * time.Millisecond
	check := func(label string, k float64) float64 {
		t.Helper()
		mu := modelRates(t, mm, deg, 0, demoBathAt(k))[1] * gate.Seconds()
		got := meanXX(t, b, n, gate)
		if sigma := math.Sqrt(mu / n); math.Abs(got-mu) > 4*sigma {
			t.Errorf("%s: xx mean %.1f per gate, phonon model × chain at %.2f K %.1f ± %.1f", label, got, k, mu, sigma)
		}
		return got
	}
	cold := check("power-on, 4.2 K", 4.2)
	// A new setpoint without a wait: on an Instant bench the sample has
	// moved only by the 50 ms of the setpoint query (of a 60 s time
	// constant), and the phonons follow the sample, not the setpoint.
	if err := b.Thermometer().SetSetpointK(ctx, 20); err != nil {
		t.Fatal(err)
	}
	early := b.Thermometer().(*Thermometer).SampleK()
	if early > 4.3 {
		t.Fatalf("sample at %g K right after the setpoint", early)
	}
	check("setpoint 20 K, before any wait", math.Round(early*100)/100)
	settle(t, b, 20)
	sample := b.Thermometer().(*Thermometer).SampleK()
	if math.Abs(sample-20) > 0.05 {
		t.Fatalf("sample at %.4f K after the wait for 20 K", sample)
	}
	// After a successful wait the phonons are at the setpoint (the sample
	// is within the ±0.05 K band: see Thermometer.WaitStableK).
	warm := check("after the wait for 20 K", 20)
	// Warming degrades the positive-chirp plateau (PHYSICS.md §7, fact of
	// the trade, common practice, no published source): phonon.Solve gives
	// n_xx 0.88 at 4.2 K and 0.61 at 20 K here.
	if warm > 0.8*cold {
		t.Errorf("xx per gate %.0f at 4.2 K, %.0f at 20 K: warming did not degrade the plateau", cold, warm)
	}
}

// At a few kelvin one sign of the chirp keeps the plateau while the other
// loses it as the power rises (PHYSICS.md §7, fact of the trade, common
// practice, no published source); without phonons both signs reach it.
func TestChirpSignAsymmetry(t *testing.T) {
	ctx := context.Background()
	for _, c := range []struct {
		name  string
		bath  *phonon.Bath
		ratio [2]float64 // allowed xx(−20 ps²)/xx(+20 ps²)
	}{
		{"demo phonons at 4.2 K", nil, [2]float64{0, 0.7}},
		{"no phonons", &phonon.Bath{}, [2]float64{0.97, 1.03}},
	} {
		b := newBench(t, Options{Seed: 4, Instant: true, PowerNoiseRel: -1, Bath: c.bath})
		if err := b.Attenuator().SetAngleDeg(ctx, mustAngle(t, 64)); err != nil {
			t.Fatal(err)
		}
		var xx [2]float64
		for i, mm := range []float64{plateauMM, 600 - 20/0.04433} {
			if err := b.Stage().MoveToMM(ctx, mm); err != nil {
				t.Fatal(err)
			}
			xx[i] = meanXX(t, b, 5, 200*time.Millisecond)
		}
		if r := xx[1] / xx[0]; r < c.ratio[0] || r > c.ratio[1] {
			t.Errorf("%s: xx %.0f at +20 ps², %.0f at −20 ps² (ratio %.3f), want a ratio in %v", c.name, xx[0], xx[1], r, c.ratio)
		}
	}
}

// Without phonons the counts do not depend on the temperature.
func TestNoPhononsIgnoreTemperature(t *testing.T) {
	run := func(k float64) []uint64 {
		ctx := context.Background()
		b := newBench(t, Options{Seed: 13, Instant: true, Bath: &phonon.Bath{}})
		if k != 4.2 {
			settle(t, b, k)
		}
		if err := b.Attenuator().SetAngleDeg(ctx, mustAngle(t, 9)); err != nil {
			t.Fatal(err)
		}
		c, err := b.Counter().Count(ctx, time.Second)
		if err != nil {
			t.Fatal(err)
		}
		return c
	}
	a, w := run(4.2), run(40)
	if a[0] != w[0] || a[1] != w[1] {
		t.Errorf("no phonons: counts %v at 4.2 K, %v at 40 K; want the same", a, w)
	}
}

// The thermometer behaves like the cryostat's controller: a setpoint outside
// 1.5–300 K is refused with ErrLimit naming the field and changes nothing;
// armed faults apply to it; a sample that never settles fails the wait with
// the reason; the same seed and calls give the same readings on an Instant
// bench.
func TestThermometerInstrument(t *testing.T) {
	ctx := context.Background()
	b := newBench(t, Options{Seed: 2, Instant: true})
	th := b.Thermometer()
	for _, k := range []float64{1, 301, math.NaN(), -4} {
		err := th.SetSetpointK(ctx, k)
		if !errors.Is(err, drivers.ErrLimit) || !strings.Contains(err.Error(), "setpoint_k") || !strings.Contains(err.Error(), "[1.5, 300] K") {
			t.Errorf("setpoint %g K: %v, want ErrLimit naming setpoint_k and the range", k, err)
		}
	}
	if s := th.(*Thermometer).SampleK(); s != 4.2 {
		t.Errorf("after refused setpoints the sample is at %g K, want 4.2 K", s)
	}
	k, err := th.TemperatureK(ctx)
	if err != nil || math.Abs(k-4.2) > 0.06 { // demo reading noise σ 0.01 K
		t.Errorf("reading %g K, %v; want 4.2 K ± noise", k, err)
	}
	if err := InjectFault(b, NameThermometer, Fault{Kind: FaultError, Calls: 1}); err != nil {
		t.Fatal(err)
	}
	if _, err := th.TemperatureK(ctx); !errors.Is(err, ErrReply) {
		t.Errorf("armed error reply: %v", err)
	}
	if err := InjectFault(b, NameThermometer, Fault{Kind: FaultStuck}); err == nil {
		t.Error("a stuck fault was armed on the thermometer, which moves no axis")
	}

	shaky := newBench(t, Options{Seed: 2, Instant: true, Cryostat: cryostat.Options{OscillationK: 0.3}})
	err = shaky.Thermometer().(drivers.Stabilizer).WaitStableK(ctx, 4.2, 0.05, 30*time.Second, 10*time.Minute)
	var se *cryostat.StabilityError
	if !errors.Is(err, cryostat.ErrNotStable) || !errors.As(err, &se) || !strings.Contains(err.Error(), "not stable within ±0.05 K") {
		t.Errorf("oscillating sample: %v, want a StabilityError", err)
	}

	readings := func() []float64 {
		b := newBench(t, Options{Seed: 77, Instant: true})
		settle(t, b, 8)
		var out []float64
		for range 5 {
			k, err := b.Thermometer().TemperatureK(ctx)
			if err != nil {
				t.Fatal(err)
			}
			out = append(out, k)
		}
		c, _ := b.Counter().Count(ctx, time.Second)
		return append(out, float64(c[0]), float64(c[1]))
	}
	r1, r2 := readings(), readings()
	for i := range r1 {
		if r1[i] != r2[i] {
			t.Fatalf("same seed, same calls: %v and %v", r1, r2)
		}
	}
}

// A cryostat with other limits gives the bench entry its range; bad options
// are refused with the field named.
func TestCryostatOptions(t *testing.T) {
	b := newBench(t, Options{Instant: true, Cryostat: cryostat.Options{MinK: 3, MaxK: 80, InitialK: 10}})
	if lim := b.ByRole(drivers.RoleThermometer).Limits; lim.TemperatureMinK != 3 || lim.TemperatureMaxK != 80 {
		t.Errorf("limits %+v, want 3–80 K", lim)
	}
	if s := b.Thermometer().(*Thermometer).SampleK(); s != 10 {
		t.Errorf("sample starts at %g K, want 10", s)
	}
	for _, c := range []struct {
		o     Options
		field string
	}{
		{Options{Cryostat: cryostat.Options{InitialK: 1000}}, "InitialK"},
		{Options{Cryostat: cryostat.Options{MinK: 2, MaxK: 450}}, "MaxK"},
		{Options{Bath: &phonon.Bath{AlphaPS2: 0.03, CutoffMeV: 50}}, "cutoff_mev"},
	} {
		if b, err := New(c.o); err == nil {
			b.Close()
			t.Errorf("%+v accepted", c.o)
		} else if !strings.Contains(err.Error(), c.field) {
			t.Errorf("%+v: %v, want the field %s named", c.o, err, c.field)
		}
	}
}

// A thermometer opened through the registry controls the sample of the
// counter on the same Bench id.
func TestRegistryThermometerSharesSample(t *testing.T) {
	set := SimSettings{Bench: "t-cryo", Seed: 6, Instant: true}
	stg := openSim(t, "grating", drivers.RoleStage, set).(drivers.Stage)
	att := openSim(t, "hwp", drivers.RoleAttenuator, set).(drivers.Attenuator)
	cnt := openSim(t, "spcm", drivers.RoleCounter, set).(drivers.Counter)
	th := openSim(t, "lakeshore", drivers.RoleThermometer, set).(drivers.Thermometer)
	ctx := context.Background()
	if err := stg.MoveToMM(ctx, plateauMM); err != nil {
		t.Fatal(err)
	}
	if err := att.SetAngleDeg(ctx, mustAngle(t, 64)); err != nil {
		t.Fatal(err)
	}
	xx := func() float64 {
		c, err := cnt.Count(ctx, time.Second)
		if err != nil {
			t.Fatal(err)
		}
		return float64(c[1])
	}
	cold := xx()
	if err := th.SetSetpointK(ctx, 20); err != nil {
		t.Fatal(err)
	}
	if err := th.(drivers.Stabilizer).WaitStableK(ctx, 20, 0.05, 30*time.Second, 30*time.Minute); err != nil {
		t.Fatal(err)
	}
	// n_xx 0.88 at 4.2 K, 0.61 at 20 K (phonon.Solve): ~350 000 against
	// ~240 000 per second, Poisson σ about 600.
	if warm := xx(); warm > 0.8*cold {
		t.Errorf("xx %.0f at 4.2 K, %.0f after warming to 20 K: the thermometer does not reach the counter's sample", cold, warm)
	}
}

// FuzzThermometerSetpoint feeds arbitrary setpoints (outside input: a scan's
// temperature axis) to the thermometer: either refused with ErrLimit and
// nothing changes, or accepted inside the range.
func FuzzThermometerSetpoint(f *testing.F) {
	for _, v := range []float64{1.5, 300, 4.2, 1.4999999, 300.0000001, math.NaN(), math.Inf(-1), -0.0, 1e308} {
		f.Add(v)
	}
	b, err := New(Options{Seed: 1, Instant: true})
	if err != nil {
		f.Fatal(err)
	}
	f.Cleanup(func() { b.Close() })
	th := b.Thermometer().(*Thermometer)
	ctx := context.Background()
	f.Fuzz(func(t *testing.T, k float64) {
		before, _ := th.c.SetpointK(ctx)
		err := th.SetSetpointK(ctx, k)
		after, _ := th.c.SetpointK(ctx)
		inside := k >= 1.5 && k <= 300
		switch {
		case inside && (err != nil || after != k):
			t.Fatalf("setpoint %g K inside the range: %v, setpoint now %g", k, err, after)
		case !inside && (!errors.Is(err, drivers.ErrLimit) || after != before):
			t.Fatalf("setpoint %g K outside the range: %v, setpoint %g → %g", k, err, before, after)
		}
		if s := th.SampleK(); !(s >= 1.5 && s <= 300) {
			t.Fatalf("sample at %g K", s)
		}
	})
}

// Counts after a stability wait do not depend on timing: a bench at Speed
// 5000 and an Instant one (as a replay uses) give the same counts bit for
// bit for the same seed and commands, although their samples are not at
// exactly the same temperature when the gates open.
func TestSettledCountsIndependentOfTiming(t *testing.T) {
	run := func(o Options) (counts []uint64, sampleK []float64) {
		ctx := context.Background()
		b := newBench(t, o)
		if err := b.Stage().MoveToMM(ctx, plateauMM); err != nil {
			t.Fatal(err)
		}
		if err := b.Attenuator().SetAngleDeg(ctx, mustAngle(t, 49)); err != nil {
			t.Fatal(err)
		}
		for _, k := range []float64{8, 20} {
			settle(t, b, k)
			sampleK = append(sampleK, b.Thermometer().(*Thermometer).SampleK())
			for range 3 {
				c, err := b.Counter().Count(ctx, 100*time.Millisecond)
				if err != nil {
					t.Fatal(err)
				}
				counts = append(counts, c...)
			}
		}
		return counts, sampleK
	}
	a, ka := run(Options{Seed: 31, Instant: true})
	b, kb := run(Options{Seed: 31, Speed: 5000})
	for i := range a {
		if a[i] != b[i] {
			t.Fatalf("same seed and commands, Instant and Speed 5000: counts %v and %v (samples at %v and %v K)", a, b, ka, kb)
		}
	}
	t.Logf("samples after the waits: Instant %v K, Speed 5000 %v K", ka, kb)
}
