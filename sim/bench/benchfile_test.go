package bench

import (
	"context"
	"errors"
	"log/slog"
	"testing"
	"time"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/benchfile"
)

// The example bench file (all roles on driver "sim", settings
// {bench: demo, seed: 1}) opens into one shared optical state through the
// bench-file loader, and faults can be armed on it.
func TestExampleBenchFileOpensSharedState(t *testing.T) {
	f, err := benchfile.Parse("example.yaml", []byte(benchfile.Example))
	if err != nil {
		t.Fatal(err)
	}
	for _, in := range f.Instruments {
		if in.Driver != DriverName {
			t.Skipf("example instrument %q uses driver %q", in.Name, in.Driver)
		}
		s, ok := in.Settings.(*SimSettings)
		if !ok {
			t.Fatalf("instrument %q: settings %T", in.Name, in.Settings)
		}
		s.Instant = true // same for all: keep the test fast
	}
	ctx := context.Background()
	b, err := benchfile.Open(ctx, f, benchfile.Options{Logger: slog.New(slog.DiscardHandler)})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	if b.Stage() == nil || b.Counter() == nil || b.Attenuator() == nil {
		t.Fatal("example bench lacks a stage, attenuator or counter")
	}
	if err := b.Attenuator().SetAngleDeg(ctx, mustAngle(t, 100)); err != nil {
		t.Fatal(err)
	}
	if err := b.Stage().MoveToMM(ctx, 600+20/0.04433); err != nil {
		t.Fatal(err)
	}
	c, err := b.Counter().Count(ctx, 100*time.Millisecond)
	if err != nil {
		t.Fatal(err)
	}
	// 20 ps², 10π: the plateau, about 40 000 xx per 100 ms (PHYSICS.md §6
	// fact of the trade; 80 MHz × 0.5 %), less the ≈ 10 % the demo phonons
	// take at 4.2 K (phonon.Solve: n_xx ≈ 0.90).
	if c[1] < 33000 {
		t.Errorf("xx %d per 100 ms on the plateau: the counter does not see the stage and attenuator", c[1])
	}
	if err := InjectFault(b, b.ByRole(drivers.RoleStage).Name, Fault{Kind: FaultError, Calls: 1}); err != nil {
		t.Fatal(err)
	}
	if _, err := b.Stage().PositionMM(ctx); !errors.Is(err, ErrReply) {
		t.Errorf("fault on the loaded bench: %v", err)
	}
}
