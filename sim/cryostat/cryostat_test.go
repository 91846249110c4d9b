package cryostat

import (
	"context"
	"errors"
	"math"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/gliss-lab/gliss/drivers"
)

// manualClock is a Clock whose Sleep advances Now at once.
type manualClock struct {
	mu sync.Mutex
	t  time.Time
}

func newManual() *manualClock { return &manualClock{t: time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)} }

func (m *manualClock) Now() time.Time {
	m.mu.Lock()
	defer m.mu.Unlock()
	return m.t
}

func (m *manualClock) Sleep(ctx context.Context, d time.Duration) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	m.mu.Lock()
	defer m.mu.Unlock()
	if d > 0 {
		m.t = m.t.Add(d)
	}
	return nil
}

func open(t *testing.T, o Options) *Cryostat {
	t.Helper()
	c, err := New(o)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { c.Close() })
	return c
}

// TestFirstOrderApproach: after a setpoint step the sample follows
// T(t) = T_sp + (T0 − T_sp)·exp(−t/τ), the step response of a first-order
// system (Ogata, Modern Control Engineering, 5th ed., §5-2).
func TestFirstOrderApproach(t *testing.T) {
	clk := newManual()
	c := open(t, Options{InitialK: 4.2, TimeConstant: 60 * time.Second, NoiseK: -1, QueryTime: -1, Clock: clk})
	ctx := context.Background()
	if err := c.SetSetpointK(ctx, 20); err != nil {
		t.Fatal(err)
	}
	var elapsed time.Duration
	for _, step := range []time.Duration{30 * time.Second, 30 * time.Second, 120 * time.Second, 420 * time.Second} {
		clk.Sleep(ctx, step)
		elapsed += step
		got, err := c.TemperatureK(ctx)
		if err != nil {
			t.Fatal(err)
		}
		want := 20 + (4.2-20)*math.Exp(-elapsed.Seconds()/60)
		if math.Abs(got-want) > 1e-9 {
			t.Errorf("%v after the step: %.9f K, want %.9f K", elapsed, got, want)
		}
		if s := c.SampleK(); math.Abs(s-want) > 1e-9 {
			t.Errorf("%v after the step: SampleK %.9f K, want %.9f K", elapsed, s, want)
		}
	}
	// A second step starts from where the sample is, not from the old setpoint.
	atStep := c.SampleK()
	if err := c.SetSetpointK(ctx, 10); err != nil {
		t.Fatal(err)
	}
	clk.Sleep(ctx, 60*time.Second)
	if got, want := c.SampleK(), 10+(atStep-10)*math.Exp(-1); math.Abs(got-want) > 1e-9 {
		t.Errorf("second step: %.9f K, want %.9f K", got, want)
	}
}

func TestSetpointLimits(t *testing.T) {
	c := open(t, Options{Clock: newManual()})
	ctx := context.Background()
	for _, k := range []float64{1.0, 0, -4, 301, math.NaN(), math.Inf(1)} {
		err := c.SetSetpointK(ctx, k)
		if !errors.Is(err, drivers.ErrLimit) || !strings.Contains(err.Error(), "setpoint_k") || !strings.Contains(err.Error(), "1.5 to 300 K") {
			t.Errorf("setpoint %g: error %v, want one wrapping ErrLimit naming setpoint_k and the range", k, err)
		}
	}
	if sp, _ := c.SetpointK(ctx); sp != 4.2 {
		t.Errorf("after refused setpoints the setpoint is %g, want 4.2 (unchanged)", sp)
	}
	for _, k := range []float64{1.5, 300} {
		if err := c.SetSetpointK(ctx, k); err != nil {
			t.Errorf("setpoint %g (range end): %v", k, err)
		}
	}
}

// TestNoise: readings scatter with the configured σ around the sample
// temperature, and the same seed gives the same readings.
func TestNoise(t *testing.T) {
	ctx := context.Background()
	read := func(seed uint64) []float64 {
		c := open(t, Options{Seed: seed, NoiseK: 0.01, Clock: newManual()})
		out := make([]float64, 4000)
		for i := range out {
			v, err := c.TemperatureK(ctx)
			if err != nil {
				t.Fatal(err)
			}
			out[i] = v
		}
		return out
	}
	a, b, d := read(7), read(7), read(8)
	var sum, sum2 float64
	same := true
	for i := range a {
		if a[i] != b[i] {
			t.Fatalf("reading %d: %v and %v with the same seed", i, a[i], b[i])
		}
		same = same && a[i] == d[i]
		sum += a[i] - 4.2
		sum2 += (a[i] - 4.2) * (a[i] - 4.2)
	}
	if same {
		t.Error("seeds 7 and 8 gave the same readings")
	}
	n := float64(len(a))
	mean, sd := sum/n, math.Sqrt(sum2/n-(sum/n)*(sum/n))
	// 4000 draws: the standard error of σ is σ/sqrt(2n) ≈ 1.1 %; allow 5 %.
	if math.Abs(sd-0.01) > 5e-4 || math.Abs(mean) > 1e-3 {
		t.Errorf("readings: mean offset %.2e K, σ %.5f K; want 0 and 0.01 K", mean, sd)
	}
}

// TestWaitStable: a step from 4.2 K to 8 K with τ = 60 s reaches ±0.05 K
// after τ·ln(3.8/0.05) ≈ 260 s, and the wait returns after that plus the
// hold of 30 s (noise σ 0.01 K may delay it a little).
func TestWaitStable(t *testing.T) {
	clk := newManual()
	c := open(t, Options{Seed: 3, Clock: clk})
	ctx := context.Background()
	if err := c.SetSetpointK(ctx, 8); err != nil {
		t.Fatal(err)
	}
	t0 := clk.Now()
	if err := c.WaitStable(ctx, 0.05, 30*time.Second, 20*time.Minute); err != nil {
		t.Fatal(err)
	}
	el := clk.Now().Sub(t0)
	lo := time.Duration(60*math.Log(3.8/0.05)*float64(time.Second)) + 30*time.Second - 5*time.Second
	if el < lo || el > lo+90*time.Second {
		t.Errorf("stable after %v, want about %v", el, lo)
	}
	if s := c.SampleK(); math.Abs(s-8) > 0.05 {
		t.Errorf("sample at %.3f K after the wait", s)
	}
}

// TestNeverStable: a limit cycle of ±0.2 K never stays within ±0.05 K; the
// wait gives up at its timeout with the reason.
func TestNeverStable(t *testing.T) {
	clk := newManual()
	c := open(t, Options{Clock: clk, OscillationK: 0.2, OscillationPeriod: 20 * time.Second})
	ctx := context.Background()
	t0 := clk.Now()
	err := c.WaitStable(ctx, 0.05, time.Minute, 10*time.Minute)
	var se *StabilityError
	if !errors.Is(err, ErrNotStable) || !errors.As(err, &se) {
		t.Fatalf("error %v, want a StabilityError wrapping ErrNotStable", err)
	}
	if el := clk.Now().Sub(t0); el < 10*time.Minute || el > 10*time.Minute+2*time.Second {
		t.Errorf("gave up after %v, want the timeout of 10m", el)
	}
	if se.LongestHeld >= time.Minute || !strings.Contains(err.Error(), "not stable within ±0.05 K of setpoint 4.2 K") {
		t.Errorf("reason: %v", err)
	}
}

func TestStabilityArguments(t *testing.T) {
	c := open(t, Options{Clock: newManual()})
	ctx := context.Background()
	for _, tc := range []struct {
		tol           float64
		hold, timeout time.Duration
		field         string
	}{
		{0, time.Second, time.Minute, "tolerance_k"},
		{-0.1, time.Second, time.Minute, "tolerance_k"},
		{math.NaN(), time.Second, time.Minute, "tolerance_k"},
		{0.05, -time.Second, time.Minute, "hold"},
		{0.05, time.Second, 0, "timeout"},
	} {
		err := c.WaitStable(ctx, tc.tol, tc.hold, tc.timeout)
		if err == nil || !strings.Contains(err.Error(), tc.field) {
			t.Errorf("%+v: error %v, want one naming %s", tc, err, tc.field)
		}
		if err := WaitStable(ctx, c, 4.2, tc.tol, tc.hold, tc.timeout, 0); err == nil || !strings.Contains(err.Error(), tc.field) {
			t.Errorf("generic %+v: error %v, want one naming %s", tc, err, tc.field)
		}
	}
}

// fixedThermometer reads a fixed temperature.
type fixedThermometer struct{ k float64 }

func (f fixedThermometer) TemperatureK(ctx context.Context) (float64, error) { return f.k, ctx.Err() }
func (fixedThermometer) SetSetpointK(context.Context, float64) error         { return nil }
func (fixedThermometer) Close() error                                        { return nil }

func TestWaitStableGeneric(t *testing.T) {
	ctx := context.Background()
	if err := WaitStable(ctx, fixedThermometer{8.01}, 8, 0.05, 0, time.Second, time.Millisecond); err != nil {
		t.Errorf("within tolerance, no hold: %v", err)
	}
	if err := WaitStable(ctx, fixedThermometer{8.01}, 8, 0.05, 20*time.Millisecond, time.Second, 2*time.Millisecond); err != nil {
		t.Errorf("within tolerance, 20 ms hold: %v", err)
	}
	err := WaitStable(ctx, fixedThermometer{8.2}, 8, 0.05, 0, 30*time.Millisecond, 5*time.Millisecond)
	if !errors.Is(err, ErrNotStable) {
		t.Errorf("outside tolerance: %v, want ErrNotStable", err)
	}
}

// TestSpeedAndCancel: at Speed 1000 on the wall clock, 2τ of instrument time
// (120 ms of wall time) brings the sample at least 1 − e^−2 of the way; a
// cancelled context stops reads and waits.
func TestSpeedAndCancel(t *testing.T) {
	c := open(t, Options{Speed: 1000, NoiseK: -1})
	ctx := context.Background()
	if err := c.SetSetpointK(ctx, 20); err != nil {
		t.Fatal(err)
	}
	time.Sleep(120 * time.Millisecond)
	if got := c.SampleK(); got < 20+(4.2-20)*math.Exp(-2) {
		t.Errorf("after 2τ of instrument time: %.3f K, want ≥ %.3f K", got, 20+(4.2-20)*math.Exp(-2))
	}
	cctx, cancel := context.WithCancel(ctx)
	cancel()
	if _, err := c.TemperatureK(cctx); !errors.Is(err, context.Canceled) {
		t.Errorf("read with a cancelled context: %v", err)
	}
	slow := open(t, Options{Speed: 1})
	wctx, wcancel := context.WithTimeout(ctx, 30*time.Millisecond)
	defer wcancel()
	start := time.Now()
	err := slow.WaitStable(wctx, 0.001, time.Hour, 2*time.Hour)
	if !errors.Is(err, context.DeadlineExceeded) || time.Since(start) > 2*time.Second {
		t.Errorf("wait under a 30 ms deadline: %v after %v", err, time.Since(start))
	}
}

func TestFaultsAndClose(t *testing.T) {
	clk := newManual()
	c := open(t, Options{Clock: clk})
	ctx := context.Background()
	c.InjectFault(drivers.ErrUnavailable)
	t0 := clk.Now()
	if _, err := c.TemperatureK(ctx); !errors.Is(err, drivers.ErrUnavailable) {
		t.Errorf("timeout fault: %v", err)
	}
	if el := clk.Now().Sub(t0); el != 2*time.Second {
		t.Errorf("timeout fault took %v of instrument time, want 2 s", el)
	}
	c.InjectFault(ErrSensor)
	if _, err := c.TemperatureK(ctx); !errors.Is(err, ErrSensor) {
		t.Errorf("sensor fault: %v", err)
	}
	if _, err := c.TemperatureK(ctx); err != nil {
		t.Errorf("after the faults: %v", err)
	}
	id, err := c.Identify(ctx)
	if err != nil || !strings.HasPrefix(id, "gliss sim cryostat") {
		t.Errorf("Identify = %q, %v", id, err)
	}
	if err := c.Close(); err != nil {
		t.Fatal(err)
	}
	if err := c.Close(); err != nil {
		t.Errorf("second Close: %v", err)
	}
	if _, err := c.TemperatureK(ctx); !errors.Is(err, drivers.ErrUnavailable) {
		t.Errorf("read after Close: %v", err)
	}
}

func TestOptionsValidation(t *testing.T) {
	for _, tc := range []struct {
		o     Options
		field string
	}{
		{Options{Speed: -1}, "Speed"},
		{Options{Speed: math.Inf(1)}, "Speed"},
		{Options{MinK: 10, MaxK: 5}, "MaxK"},
		{Options{MinK: -1, MaxK: 5}, "MinK"},
		{Options{InitialK: 500}, "InitialK"},
		{Options{TimeConstant: -time.Second}, "TimeConstant"},
		{Options{OscillationK: -1}, "OscillationK"},
	} {
		if _, err := New(tc.o); err == nil || !strings.Contains(err.Error(), tc.field) {
			t.Errorf("%+v: error %v, want one naming %s", tc.o, err, tc.field)
		}
	}
}

// Before any setpoint change the sample is exactly at its initial
// temperature at every time (SampleK's lock-free path); with an oscillation
// it is not, and SampleK follows the clock.
func TestSampleKSteadyAndOscillating(t *testing.T) {
	ctx := context.Background()
	clk := newManual()
	c := open(t, Options{InitialK: 4.2, NoiseK: -1, QueryTime: -1, Clock: clk})
	for range 3 {
		if got := c.SampleK(); got != 4.2 {
			t.Fatalf("at rest: SampleK %v K, want 4.2 exactly", got)
		}
		clk.Sleep(ctx, 17*time.Second)
	}
	clk2 := newManual()
	o := open(t, Options{InitialK: 4.2, NoiseK: -1, QueryTime: -1, Clock: clk2, OscillationK: 0.02, OscillationPeriod: 100 * time.Second})
	clk2.Sleep(ctx, 25*time.Second) // a quarter period: the oscillation at its peak
	if got, want := o.SampleK(), 4.2+0.02; math.Abs(got-want) > 1e-12 {
		t.Errorf("oscillating, a quarter period in: SampleK %.12f K, want %.12f K", got, want)
	}
}
