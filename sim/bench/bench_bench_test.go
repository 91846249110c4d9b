package bench

import (
	"context"
	"testing"
	"time"
)

// BenchmarkCountFreshPoint is one gate at a new optical state each time (the
// laser power noise makes every gate a new model point): the cost a scan
// pays per point on an Instant bench.
func BenchmarkCountFreshPoint(b *testing.B) {
	for _, c := range []struct {
		name string
		mm   float64
		uw   float64
	}{
		{"gdd0_area2pi", 600, 4},
		{"gdd20_area10pi", 600 + 20/0.04433, 100},
	} {
		b.Run(c.name, func(b *testing.B) {
			bn := newBench(b, Options{Seed: 1, Instant: true})
			ctx := context.Background()
			deg, _ := DemoAttenuator().AngleDeg(c.uw)
			if err := bn.Stage().MoveToMM(ctx, c.mm); err != nil {
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
		})
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
