package bench

import (
	"context"
	"fmt"
	"sync"

	"github.com/gliss-lab/gliss/drivers"
)

// DriverName is the name of the simulated driver in the drivers registry.
const DriverName = "sim"

var simRoles = []drivers.Role{drivers.RoleStage, drivers.RoleAttenuator, drivers.RolePowerMeter, drivers.RoleLaser, drivers.RoleCounter, drivers.RoleThermometer}

func init() { drivers.Register(DriverName, simDriver{}) }

// SimSettings are the bench-file settings of an instrument whose driver is
// "sim". Instruments opened through the registry with the same Bench id, in
// one process, share one optical state (the stage moves the chirp the
// counter sees). The first instrument opened on a Bench id creates the state
// from its settings; every later one must carry the same Seed, Speed and
// Instant. The state lives until all its instruments are closed. Its truth
// is the demo dot, chain, stretcher and attenuator (Options zero values);
// a scan that needs other truths uses New directly.
//
// One state has at most one stage, one attenuator, one laser and one
// thermometer (the sample's cryostat, demo options, sample at 4.2 K until a
// thermometer sets another temperature); power meters and counters may be
// several. The counter sees the demo dot's phonons at the sample temperature.
type SimSettings struct {
	// Bench is the id of the shared optical state ("" means "sim").
	Bench string `yaml:"bench" json:"bench"`
	// Seed of the state's random streams (see Options.Seed).
	Seed uint64 `yaml:"seed" json:"seed"`
	// Speed is the time scale (see Options.Speed; 0 means 1).
	Speed float64 `yaml:"speed" json:"speed"`
	// Instant makes the instruments answer at once (see Options.Instant).
	Instant bool `yaml:"instant" json:"instant"`
}

type simDriver struct{}

// Roles lists the roles the sim driver opens.
func (simDriver) Roles() []drivers.Role { return append([]drivers.Role(nil), simRoles...) }

// NewSettings returns the settings type a bench-file loader decodes the
// instrument's settings into.
func (simDriver) NewSettings() any { return &SimSettings{} }

var (
	sharedMu     sync.Mutex
	sharedStates = map[string]*sharedState{}
)

type sharedState struct {
	st   *state
	set  SimSettings
	refs int
}

func settingsOf(v any) (SimSettings, error) {
	switch s := v.(type) {
	case nil:
		return SimSettings{}, nil
	case SimSettings:
		return s, nil
	case *SimSettings:
		if s == nil {
			return SimSettings{}, nil
		}
		return *s, nil
	}
	return SimSettings{}, fmt.Errorf("settings of type %T, want bench.SimSettings", v)
}

// Open opens one simulated instrument on the optical state named by its
// settings' Bench id.
func (simDriver) Open(ctx context.Context, cfg drivers.Config) (drivers.Instrument, error) {
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	s, err := settingsOf(cfg.Settings)
	if err != nil {
		return nil, fmt.Errorf("sim driver: instrument %q: %w", cfg.Name, err)
	}
	if s.Bench == "" {
		s.Bench = "sim"
	}
	sharedMu.Lock()
	defer sharedMu.Unlock()
	sh := sharedStates[s.Bench]
	if sh == nil {
		st, err := newState(Options{Seed: s.Seed, Speed: s.Speed, Instant: s.Instant})
		if err != nil {
			return nil, fmt.Errorf("sim driver: instrument %q: settings: %w", cfg.Name, err)
		}
		sh = &sharedState{st: st, set: s}
		sharedStates[s.Bench] = sh
	} else if sh.set != s {
		return nil, fmt.Errorf("sim driver: instrument %q: settings %+v differ from those of sim bench %q opened first (%+v): seed, speed and instant must match", cfg.Name, s, s.Bench, sh.set)
	}
	inst, err := openOn(sh.st, cfg.Name, cfg.Role)
	if err != nil {
		if sh.refs == 0 {
			delete(sharedStates, s.Bench)
		}
		return nil, fmt.Errorf("sim driver: %w", err)
	}
	sh.refs++
	b := inst.(simInstrument).simBase()
	release := b.onClose
	id := s.Bench
	b.onClose = func() {
		release()
		sharedMu.Lock()
		defer sharedMu.Unlock()
		sh.refs--
		if sh.refs == 0 && sharedStates[id] == sh {
			delete(sharedStates, id)
		}
	}
	return inst, nil
}
