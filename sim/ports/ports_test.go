package ports

import (
	"context"
	"errors"
	"math"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/benchfile"
	"github.com/gliss-lab/gliss/drivers/transport"
	simbench "github.com/gliss-lab/gliss/sim/bench"
)

func start(t testing.TB, o Options) *Server {
	t.Helper()
	if o.Dir == "" {
		o.Dir = t.TempDir()
	}
	s, err := Start(context.Background(), o)
	if err != nil {
		if strings.Contains(err.Error(), "pty") || strings.Contains(err.Error(), "ptmx") {
			t.Skipf("no pseudo-terminals: %v", err)
		}
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

func load(t testing.TB, s *Server) *drivers.Bench {
	t.Helper()
	path, err := s.WriteBenchYAML()
	if err != nil {
		t.Fatal(err)
	}
	b, err := benchfile.Load(context.Background(), path, benchfile.Options{})
	if err != nil {
		t.Fatalf("%v\n%s", err, s.BenchYAML())
	}
	t.Cleanup(func() { b.Close() })
	return b
}

// mapCounts runs a 3×3 map (stage × attenuator) with a power reading and
// a count at each point, in snake order.
func mapCounts(t *testing.T, b *drivers.Bench) (counts [][]uint64, powers []float64) {
	t.Helper()
	ctx := context.Background()
	stage, att, pm, ctr := b.Stage(), b.Attenuator(), b.PowerMeter(), b.Counter()
	if err := b.Laser().SetDetuningMeV(ctx, 0.25); err != nil {
		t.Fatal(err)
	}
	angles := []float64{10, 25, 40}
	for i, mm := range []float64{560, 600, 640.5} {
		if err := stage.MoveToMM(ctx, mm); err != nil {
			t.Fatal(err)
		}
		for j := range angles {
			if i%2 == 1 {
				j = len(angles) - 1 - j
			}
			if err := att.SetAngleDeg(ctx, angles[j]); err != nil {
				t.Fatal(err)
			}
			p, err := pm.PowerUW(ctx)
			if err != nil {
				t.Fatal(err)
			}
			c, err := ctr.Count(ctx, 20*time.Millisecond)
			if err != nil {
				t.Fatal(err)
			}
			counts = append(counts, c)
			powers = append(powers, p)
		}
	}
	return counts, powers
}

func TestSameCountsThroughPortsAndInProcess(t *testing.T) {
	t.Run("instant", func(t *testing.T) { sameCounts(t, simbench.Options{Seed: 42, Instant: true}, 0) })
	// Timed motion (500× real time) and the wire time of 115200 baud.
	t.Run("timed", func(t *testing.T) { sameCounts(t, simbench.Options{Seed: 43, Speed: 500}, 115200) })
}

func sameCounts(t *testing.T, sim simbench.Options, baud int) {
	s := start(t, Options{Sim: sim, Baud: baud})
	viaPorts := load(t, s)
	inProc, err := simbench.New(sim)
	if err != nil {
		t.Fatal(err)
	}
	defer inProc.Close()
	c1, p1 := mapCounts(t, viaPorts)
	c2, p2 := mapCounts(t, inProc)
	total := uint64(0)
	for i := range c1 {
		if len(c1[i]) != 2 || c1[i][0] != c2[i][0] || c1[i][1] != c2[i][1] {
			t.Fatalf("point %d: counts through the ports %v, in process %v", i, c1[i], c2[i])
		}
		total += c1[i][0] + c1[i][1]
		// The power crosses the wire as 9 significant digits.
		if math.Abs(p1[i]-p2[i]) > 1e-8*math.Max(1, math.Abs(p2[i])) {
			t.Fatalf("point %d: power through the ports %v µW, in process %v µW", i, p1[i], p2[i])
		}
	}
	if total == 0 {
		t.Fatal("all counts are zero: the map measured nothing")
	}
}

func TestMotionTimingThroughPorts(t *testing.T) {
	// Speed 200: a 100 mm move (4.5 s at 25 mm/s, 50 mm/s²) takes ~23 ms.
	s := start(t, Options{Sim: simbench.Options{Seed: 3, Speed: 200}})
	b := load(t, s)
	ctx := context.Background()
	t0 := time.Now()
	if err := b.Stage().MoveToMM(ctx, 700); err != nil {
		t.Fatal(err)
	}
	el := time.Since(t0)
	// Trapezoid: 100/25 + 25/50 = 4.5 s of instrument time → 22.5 ms.
	if el < 20*time.Millisecond {
		t.Fatalf("move of 100 mm returned after %v, before the stage could arrive (22.5 ms)", el)
	}
	truth, _ := s.Bench().Stage().PositionMM(ctx)
	if math.Abs(truth-700) > 0.005 {
		t.Fatalf("simulated stage at %v mm after the move, want 700", truth)
	}
	if err := b.Stage().MoveToMM(ctx, 1300); !errors.Is(err, drivers.ErrLimit) {
		t.Fatalf("move beyond travel: %v", err)
	}
}

func TestFaultsNeverStoreWrongValues(t *testing.T) {
	f, err := ParseFaults("timeout=0.03,garble=0.03,partial=0.03,unexpected=0.03,error=0.03")
	if err != nil {
		t.Fatal(err)
	}
	s := start(t, Options{Sim: simbench.Options{Seed: 9, Instant: true, PowerNoiseRel: -1, MeterNoiseRel: -1}, Faults: f})
	path, _ := s.WriteBenchYAML()
	bf, err := benchfile.Load(context.Background(), path, benchfile.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer bf.Close()
	ctx := context.Background()
	truth := s.Bench()
	for i, mm := range []float64{100, 300, 650, 900, 20} {
		if err := bf.Stage().MoveToMM(ctx, mm); err != nil {
			t.Fatalf("move %d: %v", i, err)
		}
		got, _ := truth.Stage().PositionMM(ctx)
		if math.Abs(got-mm) > 0.005 {
			t.Fatalf("move %d: the simulated stage is at %v mm, want %v", i, got, mm)
		}
		if err := bf.Attenuator().SetAngleDeg(ctx, float64(5+8*i)); err != nil {
			t.Fatalf("angle %d: %v", i, err)
		}
		// No laser or meter noise: the reading is the Malus law at the
		// plate's true angle plus the 0.5 nW floor noise of the meter.
		p, err := bf.PowerMeter().PowerUW(ctx)
		if err != nil {
			t.Fatalf("power %d: %v", i, err)
		}
		deg, _ := truth.Attenuator().AngleDeg(ctx)
		want := simbench.DemoAttenuator().PowerUW(deg)
		if math.Abs(p-want) > 0.005 {
			t.Fatalf("power %d: read %v µW, the attenuator gives %v µW: a wrong value got through", i, p, want)
		}
	}
}

func TestVanishedPortComesBack(t *testing.T) {
	s := start(t, Options{Sim: simbench.Options{Seed: 5, Instant: true}})
	b := load(t, s)
	ctx := context.Background()
	pm := b.PowerMeter()
	if _, err := pm.PowerUW(ctx); err != nil {
		t.Fatal(err)
	}
	if err := s.Vanish("powermeter", 1500*time.Millisecond); err != nil {
		t.Fatal(err)
	}
	// Retry budget: 3 retries after 50, 100, 200 ms: shorter than the outage.
	if _, err := pm.PowerUW(ctx); !errors.Is(err, drivers.ErrUnavailable) {
		t.Fatalf("reading while the port is gone: %v; want ErrUnavailable", err)
	}
	deadline := time.Now().Add(5 * time.Second)
	for {
		_, err := pm.PowerUW(ctx)
		if err == nil {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("the link did not reconnect after the port came back: %v", err)
		}
		time.Sleep(100 * time.Millisecond)
	}
}

func TestProtocolReplies(t *testing.T) {
	s := start(t, Options{Sim: simbench.Options{Seed: 1, Instant: true}})
	op, err := transport.SerialOpener(transport.Serial{Port: s.Paths()["counter"], Baud: 115200})
	if err != nil {
		t.Fatal(err)
	}
	l := transport.NewLink("counter", op, transport.Framing{Timeout: time.Second}, nil)
	defer l.Close()
	for _, c := range []struct{ send, want string }{
		{"CHAN?", "CHAN x xx"},
		{"COUNT abc", "ERR 2 bad number"},
		{"COUNT -5", "ERR 3 out of range"},
		{"JUMP", "ERR 1 unknown command"},
		{"ECHO 16 a", "a" + strings.Repeat(".", 14)},
	} {
		got, err := l.Exchange(context.Background(), transport.Tx{Send: c.send, Reply: true})
		if err != nil || got != c.want {
			t.Errorf("%s → %q, %v; want %q", c.send, got, err, c.want)
		}
	}
}

func TestParseFaults(t *testing.T) {
	f, err := ParseFaults("timeout=0.01,garble=0.005,vanish=300s")
	if err != nil || f.TimeoutP != 0.01 || f.GarbleP != 0.005 || f.Vanish != 300*time.Second || f.Down != 2*time.Second {
		t.Fatalf("%+v, %v", f, err)
	}
	back, err := ParseFaults(f.String())
	if err != nil || back != f {
		t.Fatalf("round trip %q → %+v, %v", f.String(), back, err)
	}
	for _, bad := range []string{"timeout", "timeout=2", "colour=0.1", "vanish=-1s", "down=1s", "timeout=0.6,error=0.6", "garble=0.1,garble=0.1", "timeout=NaN"} {
		if _, err := ParseFaults(bad); err == nil {
			t.Errorf("ParseFaults(%q) accepted", bad)
		}
	}
}

func FuzzParseFaults(f *testing.F) {
	for _, s := range []string{"", "none", "timeout=0.01,garble=0.005,vanish=300s", "down=1s,vanish=2s", "error=1", "x=y"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, spec string) {
		fs, err := ParseFaults(spec)
		if err != nil {
			return
		}
		for _, p := range []float64{fs.TimeoutP, fs.GarbleP, fs.PartialP, fs.UnexpectedP, fs.ErrorP} {
			if !(p >= 0 && p <= 1) {
				t.Fatalf("%q: probability %v outside [0, 1]", spec, p)
			}
		}
		back, err := ParseFaults(fs.String())
		if err != nil || back.TimeoutP != fs.TimeoutP || back.Vanish != fs.Vanish {
			t.Fatalf("%q: round trip through %q: %+v, %v", spec, fs.String(), back, err)
		}
	})
}

// BenchmarkWireTime115200 measures transactions/s over a pseudo-terminal
// with wire-time emulation at 115200 baud, for a 10-byte command and a
// 16-byte reply (terminators included), beside the wire limit: 10 bits a
// byte (8N1) → 11520 bytes/s ÷ 26 bytes = 443 transactions/s.
func BenchmarkWireTime115200(b *testing.B) {
	const baud = 115200
	s := start(b, Options{Sim: simbench.Options{Seed: 1, Instant: true}, Baud: baud})
	op, err := transport.SerialOpener(transport.Serial{Port: s.Paths()["counter"], Baud: baud})
	if err != nil {
		b.Fatal(err)
	}
	l := transport.NewLink("counter", op, transport.Framing{Timeout: time.Second}, nil)
	defer l.Close()
	ctx := context.Background()
	tx := transport.Tx{Send: "ECHO 16 a", Reply: true} // 9 + "\n" = 10 bytes; reply 15 + "\n" = 16
	if got, err := l.Exchange(ctx, tx); err != nil || len(got)+1 != 16 {
		b.Fatalf("%q, %v", got, err)
	}
	var ru0, ru1 syscall.Rusage
	syscall.Getrusage(syscall.RUSAGE_SELF, &ru0)
	b.ResetTimer()
	t0 := time.Now()
	for i := 0; i < b.N; i++ {
		if _, err := l.Exchange(ctx, tx); err != nil {
			b.Fatal(err)
		}
	}
	el := time.Since(t0).Seconds()
	syscall.Getrusage(syscall.RUSAGE_SELF, &ru1)
	cpu := time.Duration(ru1.Utime.Nano()+ru1.Stime.Nano()-ru0.Utime.Nano()-ru0.Stime.Nano()) * time.Nanosecond
	// CPU of both ends (driver and virtual device run in this process).
	b.ReportMetric(float64(cpu.Microseconds())/float64(b.N), "cpu_µs/tx")
	limit := float64(baud) / 10 / 26
	rate := float64(b.N) / el
	b.ReportMetric(rate, "tx/s")
	b.ReportMetric(limit, "wire_limit_tx/s")
	b.ReportMetric(rate/limit, "ratio")
}
