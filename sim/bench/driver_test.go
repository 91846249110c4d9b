package bench

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/gliss-lab/gliss/drivers"
)

func openSim(t *testing.T, name string, role drivers.Role, s any) drivers.Instrument {
	t.Helper()
	d, err := drivers.Lookup("sim")
	if err != nil {
		t.Fatal(err)
	}
	inst, err := d.Open(context.Background(), drivers.Config{Name: name, Role: role, Settings: s})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { inst.Close() })
	return inst
}

// Instruments opened through the registry on one Bench id share one optical
// state: moving the stage changes what the counter counts.
func TestRegistryShareState(t *testing.T) {
	set := SimSettings{Bench: "t-share", Seed: 4, Instant: true}
	stg := openSim(t, "grating", drivers.RoleStage, set).(drivers.Stage)
	att := openSim(t, "hwp", drivers.RoleAttenuator, &set).(drivers.Attenuator)
	cnt := openSim(t, "spcm", drivers.RoleCounter, set).(drivers.Counter)
	ctx := context.Background()
	if err := att.SetAngleDeg(ctx, mustAngle(t, 100)); err != nil { // 10π
		t.Fatal(err)
	}
	count := func() uint64 {
		c, err := cnt.Count(ctx, 100*time.Millisecond)
		if err != nil {
			t.Fatal(err)
		}
		return c[1]
	}
	atZero := count()
	if err := stg.MoveToMM(ctx, 600+20/0.04433); err != nil { // 20 ps²
		t.Fatal(err)
	}
	onPlateau := count()
	// On the 20 ps² plateau xx is near 40 000 per 100 ms (full population,
	// PHYSICS.md §6) less what the demo phonons at 4.2 K take (n_xx ≈ 0.90
	// from phonon.Solve: about 35 700 after dead time); at zero chirp and 10π
	// the Rabi rotation gives another number, far outside the Poisson scatter.
	if d := float64(onPlateau) - float64(atZero); d < 10*math.Sqrt(float64(onPlateau)) || onPlateau < 33000 {
		t.Errorf("xx counts %d at zero chirp, %d on the plateau: the stage does not reach the counter", atZero, onPlateau)
	}
	// A separate Bench id is a separate optical state.
	other := openSim(t, "spcm2", drivers.RoleCounter, SimSettings{Bench: "t-other", Seed: 4, Instant: true}).(drivers.Counter)
	c, err := other.Count(ctx, 100*time.Millisecond)
	if err != nil {
		t.Fatal(err)
	}
	if c[1] > 100 { // extinction floor at power-on: only dark counts and a trace of signal
		t.Errorf("separate state counted %d xx: it sees the other bench's attenuator", c[1])
	}
}

func TestRegistryRejects(t *testing.T) {
	d, _ := drivers.Lookup("sim")
	ctx := context.Background()
	set := SimSettings{Bench: "t-reject", Seed: 1, Instant: true}
	openSim(t, "stage-a", drivers.RoleStage, set)
	openSim(t, "lakeshore", drivers.RoleThermometer, set)
	for _, c := range []struct {
		cfg  drivers.Config
		want string
	}{
		{drivers.Config{Name: "stage-b", Role: drivers.RoleStage, Settings: set}, "already has a stage"},
		{drivers.Config{Name: "stage-a", Role: drivers.RoleCounter, Settings: set}, "used twice"},
		{drivers.Config{Name: "c", Role: drivers.RoleCounter, Settings: SimSettings{Bench: "t-reject", Seed: 2, Instant: true}}, "must match"},
		{drivers.Config{Name: "c", Role: drivers.RoleCounter, Settings: map[string]any{"seed": 1}}, "want bench.SimSettings"},
		{drivers.Config{Name: "t2", Role: drivers.RoleThermometer, Settings: set}, "already has a thermometer"},
		{drivers.Config{Name: "c", Role: drivers.Role("spectrometer"), Settings: set}, "no \"spectrometer\" role"},
		{drivers.Config{Name: "c", Role: drivers.RoleCounter, Settings: SimSettings{Bench: "t-bad", Speed: -3}}, "Options.Speed"},
	} {
		inst, err := d.Open(ctx, c.cfg)
		if err == nil {
			inst.Close()
			t.Errorf("Open(%+v) accepted", c.cfg)
		} else if !strings.Contains(err.Error(), c.want) {
			t.Errorf("Open(%+v): %v, want %q", c.cfg, err, c.want)
		}
	}
	if ns, ok := d.(interface{ NewSettings() any }); !ok {
		t.Error("sim driver has no NewSettings")
	} else if _, ok := ns.NewSettings().(*SimSettings); !ok {
		t.Error("NewSettings is not *SimSettings")
	}
}

// When all its instruments are closed, a shared state goes away: the next
// Open may use other settings.
func TestRegistryStateLifetime(t *testing.T) {
	d, _ := drivers.Lookup("sim")
	ctx := context.Background()
	a, err := d.Open(ctx, drivers.Config{Name: "s", Role: drivers.RoleStage, Settings: SimSettings{Bench: "t-life", Seed: 1, Instant: true}})
	if err != nil {
		t.Fatal(err)
	}
	if err := a.(drivers.Stage).MoveToMM(ctx, 10); err != nil {
		t.Fatal(err)
	}
	a.Close()
	a.Close()
	b, err := d.Open(ctx, drivers.Config{Name: "s", Role: drivers.RoleStage, Settings: SimSettings{Bench: "t-life", Seed: 2, Instant: true}})
	if err != nil {
		t.Fatalf("reopen after close with new settings: %v", err)
	}
	defer b.Close()
	if p, _ := b.(drivers.Stage).PositionMM(ctx); p != stageStartMM {
		t.Errorf("new state starts at %g, want %g", p, stageStartMM)
	}
	if err := InjectFault(&drivers.Bench{Entries: []*drivers.Entry{{Name: "s", Inst: b}}}, "s", Fault{Kind: FaultError}); err != nil {
		t.Fatal(err)
	}
	if _, err := b.(drivers.Stage).PositionMM(ctx); !errors.Is(err, ErrReply) {
		t.Errorf("fault on a registry-opened stage: %v", err)
	}
}
