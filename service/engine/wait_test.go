package engine

import (
	"context"
	"strings"
	"testing"
	"time"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/sim/cryostat"
)

// plainThermometer hides the simulated cryostat's own stability wait, as a
// serial temperature controller driven by the line-protocol driver has none.
type plainThermometer struct{ drivers.Thermometer }

// TestWaitStableWithoutStabilizer: the engine's own polling wait settles on
// a first-order approach and gives up on a controller that oscillates.
func TestWaitStableWithoutStabilizer(t *testing.T) {
	ctx := context.Background()
	// Simulated cryostat 1000× faster than real time: τ = 60 s instrument time is 60 ms here.
	c, err := cryostat.New(cryostat.Options{Seed: 3, Speed: 1000})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	th := plainThermometer{c}
	if err := th.SetSetpointK(ctx, 8); err != nil {
		t.Fatal(err)
	}
	// ±0.05 K for 30 ms (30 s instrument time), at most 2 s (2000 s).
	if err := waitStable(ctx, th, 8, 0.05, 30*time.Millisecond, 2*time.Second); err != nil {
		t.Fatalf("first-order approach to 8 K did not settle: %v", err)
	}
	if k, _ := c.TemperatureK(ctx); k < 7.9 || k > 8.1 {
		t.Errorf("settled at %.3f K, want 8 ± 0.1 K", k)
	}

	// ±0.3 K limit cycle of 200 s (0.2 s here): within ±0.05 K about 11 % of
	// the time, a few ms per crossing, never for the 1 s hold (ten polls in a row).
	osc, err := cryostat.New(cryostat.Options{Seed: 4, Speed: 1000, OscillationK: 0.3, OscillationPeriod: 200 * time.Second})
	if err != nil {
		t.Fatal(err)
	}
	defer osc.Close()
	err = waitStable(ctx, plainThermometer{osc}, 4.2, 0.05, time.Second, 1500*time.Millisecond)
	if err == nil || !strings.Contains(err.Error(), "not stable") {
		t.Errorf("an oscillating controller: %v, want a 'not stable' error", err)
	}
}
