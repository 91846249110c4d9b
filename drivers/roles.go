// Package drivers holds gliss's instrument roles as small Go interfaces, and
// the registry through which drivers (simulated or real) make instruments of
// those roles by name, in the manner of database/sql.
//
// Every method takes a context and honours its cancellation. Physical units
// are in the parameter and method names; values are float64 in those units.
// Limits reported by drivers are software limits: a convenience, never a
// safety interlock.
package drivers

import (
	"context"
	"errors"
	"time"
)

// Role names an instrument role, as written in bench files.
type Role string

// The instrument roles.
const (
	RoleStage       Role = "stage"
	RoleAttenuator  Role = "attenuator"
	RolePowerMeter  Role = "powermeter"
	RoleCounter     Role = "counter"
	RoleLaser       Role = "laser"
	RoleThermometer Role = "thermometer"
)

// Instrument is what every instrument of every role is.
type Instrument interface {
	// Close releases the instrument's transport. It is safe to call twice.
	Close() error
}

// Identifier is implemented by instruments that can say what they are
// (an SCPI *IDN? reply, a firmware banner, "gliss sim stage").
type Identifier interface {
	Identify(ctx context.Context) (string, error)
}

// Stage is a motorised translation stage (the grating stage of the stretcher).
type Stage interface {
	Instrument
	// MoveToMM moves to an absolute position and returns once the stage has
	// arrived (or with an error: a move that does not arrive is never a success).
	MoveToMM(ctx context.Context, mm float64) error
	// PositionMM reads the current position.
	PositionMM(ctx context.Context) (float64, error)
}

// Attenuator is a motorised rotation mount (half-wave plate before a
// polariser, or a graded ND wheel).
type Attenuator interface {
	Instrument
	// SetAngleDeg rotates to an absolute angle and returns once it has arrived.
	SetAngleDeg(ctx context.Context, deg float64) error
	// AngleDeg reads the current angle.
	AngleDeg(ctx context.Context) (float64, error)
}

// PowerMeter reads the average optical power.
type PowerMeter interface {
	Instrument
	// PowerUW reads the average power, µW.
	PowerUW(ctx context.Context) (float64, error)
}

// Counter counts photons on one or more channels during a gate.
type Counter interface {
	Instrument
	// Channels names the channels in the order Count returns them ("x", "xx").
	Channels() []string
	// Count opens the gate for the given length and returns the counts per channel.
	Count(ctx context.Context, gate time.Duration) ([]uint64, error)
}

// CounterInto is a Counter that can put its counts in the caller's memory:
// CountInto is Count with the counts appended to dst[:0] (allocating only
// when dst is too short). The engine uses it, when a counter has it, to
// keep a point's counts in the point's own allocation.
type CounterInto interface {
	Counter
	CountInto(ctx context.Context, gate time.Duration, dst []uint64) ([]uint64, error)
}

// Laser is the excitation laser, tunable around the two-photon resonance.
type Laser interface {
	Instrument
	// SetDetuningMeV sets the per-photon detuning from the two-photon resonance.
	SetDetuningMeV(ctx context.Context, mev float64) error
	// DetuningMeV reads the current detuning.
	DetuningMeV(ctx context.Context) (float64, error)
}

// Thermometer is a cryostat temperature controller.
type Thermometer interface {
	Instrument
	// TemperatureK reads the sample temperature.
	TemperatureK(ctx context.Context) (float64, error)
	// SetSetpointK sets the temperature setpoint; it does not wait.
	SetSetpointK(ctx context.Context, k float64) error
}

// Stabilizer is implemented by thermometers that can wait until the sample
// temperature is stable: within ±tolK of setpointK for hold, giving up
// after timeout with an error that says why (the scan pauses with it).
type Stabilizer interface {
	WaitStableK(ctx context.Context, setpointK, tolK float64, hold, timeout time.Duration) error
}

// ErrUnavailable marks an instrument that does not answer (timeout, vanished
// port). Callers may retry later; the scan engine pauses on it.
var ErrUnavailable = errors.New("instrument unavailable")

// ErrLimit marks a request outside an instrument's limits. It is never sent on.
var ErrLimit = errors.New("outside the instrument's limits")
