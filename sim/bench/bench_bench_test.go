package bench

import (
	"context"
	"testing"
	"time"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// BenchmarkCountFreshPoint is one gate at a new optical state each time (the
// laser power noise makes every gate a new model point): the cost a scan
// pays per point on an Instant bench, with the default bench's demo phonons
// at 4.2 K and without phonons (Options.Bath α 0, the plain model).
func BenchmarkCountFreshPoint(b *testing.B) {
	for _, c := range []struct {
		name string
		mm   float64
		uw   float64
	}{
		{"gdd0_area2pi", 600, 4},
		{"gdd20_area10pi", 600 + 20/0.04433, 100},
	} {
		for _, ph := range []struct {
			name string
			bath *phonon.Bath
		}{{"phonons_4.2K", nil}, {"no_phonons", &phonon.Bath{}}} {
			b.Run(c.name+"/"+ph.name, func(b *testing.B) {
				countFresh(b, Options{Seed: 1, Instant: true, Bath: ph.bath}, c.mm, c.uw)
			})
		}
	}
}

// countFresh times gates at stage mm and power uw on a bench of o.
func countFresh(b *testing.B, o Options, mm, uw float64) {
	bn := newBench(b, o)
	ctx := context.Background()
	deg, _ := DemoAttenuator().AngleDeg(uw)
	if err := bn.Stage().MoveToMM(ctx, mm); err != nil {
		b.Fatal(err)
	}
	if err := bn.Attenuator().SetAngleDeg(ctx, deg); err != nil {
		b.Fatal(err)
	}
	cnt := bn.Counter()
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		if _, err := cnt.Count(ctx, time.Second); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/1e3, "µs/gate")
}

// BenchmarkStabilityWaitInstant is one setpoint change (4.2 K ↔ 20 K) and
// the wait for ±0.05 K over 30 s on an Instant bench: about 6 minutes of
// cryostat time, polled every 1 s, without sleeping.
func BenchmarkStabilityWaitInstant(b *testing.B) {
	bn := newBench(b, Options{Seed: 1, Instant: true})
	ctx := context.Background()
	th := bn.Thermometer()
	st := th.(drivers.Stabilizer)
	i := 0
	for b.Loop() {
		k := []float64{20, 4.2}[i%2]
		i++
		if err := th.SetSetpointK(ctx, k); err != nil {
			b.Fatal(err)
		}
		if err := st.WaitStableK(ctx, k, 0.05, 30*time.Second, 30*time.Minute); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkCountRepeatedPoint is repeated gates at one state with the laser
// noise off: every gate after the first is a cache hit.
func BenchmarkCountRepeatedPoint(b *testing.B) {
	bn := newBench(b, Options{Seed: 1, Instant: true, PowerNoiseRel: -1})
	ctx := context.Background()
	deg, _ := DemoAttenuator().AngleDeg(100)
	if err := bn.Stage().MoveToMM(ctx, 600+20/0.04433); err != nil {
		b.Fatal(err)
	}
	if err := bn.Attenuator().SetAngleDeg(ctx, deg); err != nil {
		b.Fatal(err)
	}
	cnt := bn.Counter()
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		if _, err := cnt.Count(ctx, time.Second); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/1e3, "µs/gate")
}

// BenchmarkMoveInstant is the overhead of one stage move on an Instant bench.
func BenchmarkMoveInstant(b *testing.B) {
	bn := newBench(b, Options{Seed: 1, Instant: true})
	ctx := context.Background()
	st := bn.Stage()
	i := 0
	for b.Loop() {
		i++
		if err := st.MoveToMM(ctx, float64(i%1200)); err != nil {
			b.Fatal(err)
		}
	}
}
