package bench

import (
	"fmt"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/calib"
	"github.com/gliss-lab/gliss/sim/cryostat"
)

// DemoStretcher is the demo stretcher of PHYSICS.md: 1800 lines/mm in
// Littrow at 785 nm, N = 4 passes, lever k = 2, zero dispersion at 600 mm of
// a 1200 mm stage: 0.04433 ps²/mm, ±26.6 ps² over the travel. Invented.
func DemoStretcher() calib.Stretcher {
	return calib.Stretcher{
		LinesPerMM:   1800,
		WavelengthNM: 785,
		Littrow:      true,
		Order:        1,
		Passes:       4,
		Lever:        2,
		ZeroMM:       600,
		Sign:         1,
	}
}

// DemoAttenuator is the demo attenuator of PHYSICS.md: a half-wave plate
// before a polariser delivering 0.05 µW (extinction floor) to 200 µW on the
// sample, maximum transmission at 0°. Invented.
func DemoAttenuator() calib.Malus {
	return calib.Malus{PMinUW: 0.05, PMaxUW: 200, Theta0Deg: 0}
}

// Instrument names of the built-in simulated bench.
const (
	NameStage      = "stage"
	NameAttenuator = "attenuator"
	NamePowerMeter = "powermeter"
	NameLaser      = "laser"
	NameCounter    = "counter"
	// NameThermometer is the cryostat's temperature controller (role
	// drivers.RoleThermometer).
	NameThermometer = "cryostat"
)

// Limits of the simulated instruments, as a bench file would give them.
func stageLimits() drivers.Limits {
	return drivers.Limits{StageMinMM: stageMinMM, StageMaxMM: stageMaxMM,
		StageSpeedMMPerS: stageSpeedMMPerS, StageAccelMMPerS2: stageAccelMMPerS2}
}

func attenuatorLimits() drivers.Limits {
	return drivers.Limits{AngleMinDeg: angleMinDeg, AngleMaxDeg: angleMaxDeg,
		RotationSpeedDegPerS: rotSpeedDegPerS, PowerMaxUW: DemoAttenuator().PMaxUW}
}

func powerMeterLimits() drivers.Limits {
	return drivers.Limits{PowerMaxUW: DemoAttenuator().PMaxUW}
}

func laserLimits() drivers.Limits {
	return drivers.Limits{DetuningMinMeV: detuningMinMeV, DetuningMaxMeV: detuningMaxMeV,
		DetuningSpeedMeVPerS: tuneSpeedMeVPerS}
}

func counterLimits() drivers.Limits {
	return drivers.Limits{CountRateMaxHz: map[string]float64{"x": countRateMaxHz, "xx": countRateMaxHz}}
}

func limitsFor(r drivers.Role) drivers.Limits {
	switch r {
	case drivers.RoleThermometer:
		d := cryostat.Demo()
		return drivers.Limits{TemperatureMinK: d.MinK, TemperatureMaxK: d.MaxK, TemperatureTimeConstantS: d.TimeConstant.Seconds()}
	case drivers.RoleStage:
		return stageLimits()
	case drivers.RoleAttenuator:
		return attenuatorLimits()
	case drivers.RolePowerMeter:
		return powerMeterLimits()
	case drivers.RoleLaser:
		return laserLimits()
	case drivers.RoleCounter:
		return counterLimits()
	}
	return drivers.Limits{}
}

// Limits returns the software limits of the simulated instrument of role r
// (what New puts in its entries with the zero Options; a bench file naming
// driver "sim" should use the same or narrower ones). For the thermometer
// they are the demo cryostat's range, 1.5–300 K; New with other
// Options.Cryostat limits uses that cryostat's range.
func Limits(r drivers.Role) drivers.Limits { return limitsFor(r) }

// New builds the built-in simulated bench: a stage, an attenuator, a power
// meter, a laser, a counter and the cryostat's thermometer sharing one
// optical state and one sample. Its Calibration is
// the nominal demo calibration (DemoStretcher, DemoAttenuator), whatever the
// truth in o.
func New(o Options) (*drivers.Bench, error) {
	st, err := newState(o)
	if err != nil {
		return nil, fmt.Errorf("sim bench: %w", err)
	}
	b := &drivers.Bench{
		Name:        "sim",
		SimSeed:     o.Seed,
		Calibration: drivers.Calibration{Stretcher: DemoStretcher(), Attenuator: DemoAttenuator()},
	}
	roles := []struct {
		name string
		role drivers.Role
	}{
		{NameStage, drivers.RoleStage},
		{NameAttenuator, drivers.RoleAttenuator},
		{NamePowerMeter, drivers.RolePowerMeter},
		{NameLaser, drivers.RoleLaser},
		{NameCounter, drivers.RoleCounter},
		{NameThermometer, drivers.RoleThermometer},
	}
	for _, r := range roles {
		inst, err := openOn(st, r.name, r.role)
		if err != nil {
			b.Close()
			return nil, fmt.Errorf("sim bench: %w", err)
		}
		lim := limitsFor(r.role)
		if r.role == drivers.RoleThermometer {
			lim = thermometerLimits(st.cryo)
		}
		b.Entries = append(b.Entries, &drivers.Entry{Name: r.name, Role: r.role, Driver: DriverName, Limits: lim, Inst: inst})
	}
	if err := b.Validate(); err != nil {
		b.Close()
		return nil, fmt.Errorf("sim bench: %w", err)
	}
	return b, nil
}

// openOn makes one simulated instrument of role r on the optical state st.
func openOn(st *state, name string, r drivers.Role) (drivers.Instrument, error) {
	switch r {
	case drivers.RoleStage:
		b, err := newBase(st, string(r), name, true)
		if err != nil {
			return nil, err
		}
		return &Stage{b}, nil
	case drivers.RoleAttenuator:
		b, err := newBase(st, string(r), name, true)
		if err != nil {
			return nil, err
		}
		return &Attenuator{b}, nil
	case drivers.RoleLaser:
		b, err := newBase(st, string(r), name, true)
		if err != nil {
			return nil, err
		}
		return &Laser{b}, nil
	case drivers.RolePowerMeter:
		b, err := newBase(st, string(r), name, false)
		if err != nil {
			return nil, err
		}
		return &PowerMeter{b}, nil
	case drivers.RoleCounter:
		b, err := newBase(st, string(r), name, false)
		if err != nil {
			return nil, err
		}
		return newCounter(b), nil
	case drivers.RoleThermometer:
		// One sample, one cryostat: at most one thermometer per state.
		b, err := newBaseOwning(st, string(r), name, false, true)
		if err != nil {
			return nil, err
		}
		return &Thermometer{base: b, c: st.cryo}, nil
	}
	return nil, fmt.Errorf("instrument %q: the sim driver has no %q role (roles: %v)", name, r, simRoles)
}
