// Package lineproto is gliss's driver for instruments that speak ASCII
// lines (over serial, TCP, or a replayed recording), with every command and
// reply described in the bench file by templates and patterns. Its "scpi"
// flavour adds the IEEE 488.2 common commands: identification with *IDN? at
// connect, *CLS, the SYST:ERR? error queue after each set command, and
// *OPC? for motion completion.
//
// Faults are handled as follows: idempotent queries are retried with
// backoff up to the retry budget, after which the error wraps
// drivers.ErrUnavailable; a move whose command failed is never re-sent
// before the position has been read back; a reply that cannot be parsed is
// an error, never a zero; the link reconnects after a lost port.
package lineproto

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"path/filepath"
	"time"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/transport"
)

func init() {
	drivers.Register("lineproto", &Driver{flavour: "lineproto"})
	drivers.Register("scpi", &Driver{flavour: "scpi"})
}

// Driver opens line-protocol instruments. It implements drivers.Driver and
// the bench-file loader's NewSettings.
type Driver struct{ flavour string }

// Roles lists every role: what an instrument does is in its commands.
func (d *Driver) Roles() []drivers.Role {
	return []drivers.Role{drivers.RoleStage, drivers.RoleAttenuator, drivers.RolePowerMeter,
		drivers.RoleCounter, drivers.RoleLaser, drivers.RoleThermometer}
}

// NewSettings returns the settings with this flavour's defaults, for the
// bench-file loader to decode into.
func (d *Driver) NewSettings() any { return defaultSettings(d.flavour) }

// Open connects to one instrument: it takes its link from the pool (one
// link per port, shared by the axes of one controller), identifies it if
// the settings say how, and sends the init commands.
func (d *Driver) Open(ctx context.Context, cfg drivers.Config) (drivers.Instrument, error) {
	s, ok := cfg.Settings.(*Settings)
	if !ok || s == nil {
		return nil, fmt.Errorf("%s %q: driver %s: settings of type %T, want *lineproto.Settings", cfg.Role, cfg.Name, d.flavour, cfg.Settings)
	}
	ex, err := openLink(s)
	if err != nil {
		return nil, fmt.Errorf("%s %q: %w", cfg.Role, cfg.Name, err)
	}
	log := s.log
	if log == nil {
		log = slog.Default()
	}
	in := &Instrument{name: cfg.Name, role: cfg.Role, s: s, ex: transport.Recorded(ex, s.rec), log: log}
	if in.s.flavour == "scpi" && s.Commands.Busy == nil && s.Commands.Wait == nil {
		s.Commands.Wait = &Query{Send: mustTemplate("*OPC?"), Pattern: MustPattern(`^\s*\+?(?P<value>1)\s*$`)}
	}
	if s.Identify != "" {
		id, err := in.query(ctx, "identify", s.Identify, 0)
		if err != nil {
			ex.Close()
			return nil, err
		}
		in.id = id
	}
	for _, c := range s.Init {
		if err := in.command(ctx, "init", c, 0); err != nil {
			ex.Close()
			return nil, err
		}
	}
	out, err := forRole(in)
	if err != nil {
		ex.Close()
	}
	return out, err
}

func mustTemplate(s string) Template {
	t, err := ParseTemplate(s)
	if err != nil {
		panic(err)
	}
	return t
}

type linkSpec struct {
	serial  transport.Serial
	tcp     string
	framing transport.Framing
}

func openLink(s *Settings) (transport.Exchanger, error) {
	pool := s.pool
	if pool == nil {
		pool = transport.DefaultPool
	}
	t := s.Transport
	if t.Replay != "" {
		key, _ := filepath.Abs(t.Replay)
		return pool.Get("replay:"+key, linkSpec{}, func() (transport.Exchanger, error) {
			return transport.LoadReplay(t.Replay)
		})
	}
	spec := linkSpec{framing: t.framing()}
	var key string
	var op transport.Opener
	if t.Serial != "" {
		spec.serial = transport.Serial{Port: t.Serial, Baud: t.Baud, DataBits: t.DataBits, Parity: t.Parity, StopBits: t.StopBits}
		var err error
		if op, err = transport.SerialOpener(spec.serial); err != nil {
			return nil, fmt.Errorf("serial %s: %w", t.Serial, err)
		}
		key = "serial:" + t.Serial
	} else {
		spec.tcp = t.TCP
		op = transport.TCPOpener(t.TCP)
		key = "tcp:" + t.TCP
	}
	return pool.Get(key, spec, func() (transport.Exchanger, error) {
		name := t.Serial
		if name == "" {
			name = t.TCP
		}
		log := s.log
		if log == nil {
			log = slog.Default()
		}
		return transport.NewLink(name, op, spec.framing, log), nil
	})
}

// Instrument is one opened line-protocol instrument: the part common to
// all roles (Identify, Home, Close). Open returns it wrapped in the type of
// its role (Stage, Attenuator, …).
type Instrument struct {
	name string
	role drivers.Role
	s    *Settings
	ex   transport.Exchanger
	id   string
	log  *slog.Logger
}

func (in *Instrument) errf(format string, a ...any) error {
	return fmt.Errorf("%s %q: "+format, append([]any{in.role, in.name}, a...)...)
}

func (in *Instrument) wrap(what string, err error) error {
	return fmt.Errorf("%s %q: %s: %w", in.role, in.name, what, err)
}

// Close releases the link (the last instrument on a port closes it).
func (in *Instrument) Close() error { return in.ex.Close() }

// Identify asks the instrument who it is (the identify command, live, so
// that it also tells whether the instrument answers now). Without an
// identify command it reads the role's position or value instead and
// describes the link; a counter without one is only described.
func (in *Instrument) Identify(ctx context.Context) (string, error) {
	if in.s.Identify != "" {
		id, err := in.query(ctx, "identify", in.s.Identify, 0)
		if err == nil {
			in.id = id
		}
		return id, err
	}
	desc := fmt.Sprintf("%s %s on %s (no identify command)", in.s.flavour, in.role, in.linkName())
	var err error
	switch in.role {
	case drivers.RoleStage, drivers.RoleAttenuator, drivers.RoleLaser:
		_, err = in.position(ctx)
	case drivers.RolePowerMeter:
		_, err = in.powerUW(ctx)
	case drivers.RoleThermometer:
		_, err = in.temperatureK(ctx)
	}
	if err != nil {
		return "", err
	}
	return desc, nil
}

func (in *Instrument) linkName() string {
	t := in.s.Transport
	switch {
	case t.Serial != "":
		return t.Serial
	case t.TCP != "":
		return t.TCP
	}
	return t.Replay
}

// exchange runs one transaction and checks the reply for the error pattern.
func (in *Instrument) exchange(ctx context.Context, cmd string, reply bool, extra time.Duration) (string, error) {
	tx := transport.Tx{Instrument: in.name, Send: cmd, Reply: reply}
	if extra > 0 {
		tx.Timeout = in.s.Transport.Timeout + extra
	}
	got, err := in.ex.Exchange(ctx, tx)
	if err != nil {
		return "", err
	}
	if reply && in.s.ErrorReply.Match(got) {
		return got, fmt.Errorf("%w: %q answered %q", ErrRefused, cmd, got)
	}
	return got, nil
}

// query sends an idempotent query and returns its reply line, retrying
// with backoff. When the budget is spent the error wraps
// drivers.ErrUnavailable.
func (in *Instrument) query(ctx context.Context, what, cmd string, extra time.Duration) (string, error) {
	return retry(ctx, in, what, func() (string, error) { return in.exchange(ctx, cmd, true, extra) })
}

// retry runs f up to 1+Retries times with doubling backoff.
func retry[T any](ctx context.Context, in *Instrument, what string, f func() (T, error)) (T, error) {
	var zero T
	wait := in.s.Backoff
	var last error
	for attempt := 0; attempt <= in.s.Retries; attempt++ {
		if attempt > 0 {
			in.log.Warn("retrying", "instrument", in.name, "op", what, "attempt", attempt+1, "err", last)
			if err := sleep(ctx, wait); err != nil {
				return zero, in.wrap(what, err)
			}
			wait *= 2
		}
		v, err := f()
		if err == nil {
			return v, nil
		}
		if ctx.Err() != nil {
			return zero, in.wrap(what, err)
		}
		last = err
	}
	return zero, fmt.Errorf("%s %q: %s: %d attempts failed: %w: %w", in.role, in.name, what, in.s.Retries+1, drivers.ErrUnavailable, last)
}

func sleep(ctx context.Context, d time.Duration) error {
	return drivers.Wait(ctx, d)
}

// command sends a set command once (never retried here): it reads the
// acknowledgement if the settings have one, then runs the error query.
func (in *Instrument) command(ctx context.Context, what, cmd string, extra time.Duration) error {
	got, err := in.exchange(ctx, cmd, in.s.Ack != nil, extra)
	if err != nil {
		return in.wrap(what, err)
	}
	if in.s.Ack != nil && !in.s.Ack.Match(got) {
		return in.wrap(what, fmt.Errorf("%w: %q answered %q, want the acknowledgement %q", ErrBadReply, cmd, got, in.s.Ack))
	}
	return in.checkErrorQueue(ctx, what, cmd)
}

func (in *Instrument) checkErrorQueue(ctx context.Context, what, cmd string) error {
	if in.s.ErrorQuery == "" {
		return nil
	}
	got, err := in.query(ctx, what+": error query", in.s.ErrorQuery, 0)
	if err != nil {
		return err
	}
	if !in.s.ErrorNone.Match(got) {
		return in.wrap(what, fmt.Errorf("%w: after %q, %q answered %q", ErrRefused, cmd, in.s.ErrorQuery, got))
	}
	return nil
}

func (in *Instrument) vars(v float64) Vars { return Vars{Value: v, Axis: in.s.Axis} }

// readQuery renders and sends a numeric query, retrying both the exchange
// and the parsing (a garbled reply is re-asked, never taken as a number).
func (in *Instrument) readNumber(ctx context.Context, what string, q *Query, unit string, extra time.Duration) (float64, error) {
	if q == nil {
		return 0, in.errf("%s: the bench file gives no command for it", what)
	}
	cmd, err := q.Send.Render(in.vars(0))
	if err != nil {
		return 0, in.wrap(what, err)
	}
	want := unit
	if want == "" {
		want = q.Unit
	}
	return retry(ctx, in, what, func() (float64, error) {
		got, err := in.exchange(ctx, cmd, true, extra)
		if err != nil {
			return 0, err
		}
		return ParseNumber(got, q.Pattern, q.Unit, want)
	})
}

// The value Open returns implements exactly its role's interface (callers
// tell roles apart by type assertion), plus drivers.Identifier.
type (
	// Stage is a lineproto stage.
	Stage struct{ *Instrument }
	// Attenuator is a lineproto attenuator.
	Attenuator struct{ *Instrument }
	// PowerMeter is a lineproto power meter.
	PowerMeter struct{ *Instrument }
	// Counter is a lineproto counter.
	Counter struct{ *Instrument }
	// Laser is a lineproto laser.
	Laser struct{ *Instrument }
	// Thermometer is a lineproto thermometer.
	Thermometer struct{ *Instrument }
)

// MoveToMM moves the stage and waits for it to arrive.
func (s Stage) MoveToMM(ctx context.Context, mm float64) error { return s.moveToMM(ctx, mm) }

// PositionMM reads the stage's position.
func (s Stage) PositionMM(ctx context.Context) (float64, error) { return s.positionMM(ctx) }

// SetAngleDeg rotates the attenuator and waits for it to arrive.
func (a Attenuator) SetAngleDeg(ctx context.Context, deg float64) error {
	return a.setAngleDeg(ctx, deg)
}

// AngleDeg reads the attenuator's angle.
func (a Attenuator) AngleDeg(ctx context.Context) (float64, error) { return a.angleDeg(ctx) }

// PowerUW reads the power meter.
func (p PowerMeter) PowerUW(ctx context.Context) (float64, error) { return p.powerUW(ctx) }

// Channels names the counter's channels.
func (c Counter) Channels() []string { return c.channels() }

// Count opens the gate and returns the counts per channel.
func (c Counter) Count(ctx context.Context, gate time.Duration) ([]uint64, error) {
	return c.count(ctx, gate)
}

// SetDetuningMeV tunes the laser and waits until it reports the detuning.
func (l Laser) SetDetuningMeV(ctx context.Context, mev float64) error {
	return l.setDetuningMeV(ctx, mev)
}

// DetuningMeV reads the laser's detuning.
func (l Laser) DetuningMeV(ctx context.Context) (float64, error) { return l.detuningMeV(ctx) }

// TemperatureK reads the thermometer.
func (t Thermometer) TemperatureK(ctx context.Context) (float64, error) { return t.temperatureK(ctx) }

// SetSetpointK sets the thermometer's setpoint.
func (t Thermometer) SetSetpointK(ctx context.Context, k float64) error {
	return t.setSetpointK(ctx, k)
}

var (
	_ drivers.Stage       = Stage{}
	_ drivers.Attenuator  = Attenuator{}
	_ drivers.PowerMeter  = PowerMeter{}
	_ drivers.Counter     = Counter{}
	_ drivers.Laser       = Laser{}
	_ drivers.Thermometer = Thermometer{}
	_ drivers.Identifier  = Stage{}
)

// forRole wraps in in the type of its role.
func forRole(in *Instrument) (drivers.Instrument, error) {
	switch in.role {
	case drivers.RoleStage:
		return Stage{in}, nil
	case drivers.RoleAttenuator:
		return Attenuator{in}, nil
	case drivers.RolePowerMeter:
		return PowerMeter{in}, nil
	case drivers.RoleCounter:
		return Counter{in}, nil
	case drivers.RoleLaser:
		return Laser{in}, nil
	case drivers.RoleThermometer:
		return Thermometer{in}, nil
	}
	return nil, fmt.Errorf("%s %q: unknown role", in.role, in.name)
}

var errWrongRole = errors.New("not this instrument's role")

func (in *Instrument) must(r drivers.Role) error {
	if in.role != r {
		return in.errf("%s call: %w", r, errWrongRole)
	}
	return nil
}

// moveToMM moves a stage and waits for it to arrive.
func (in *Instrument) moveToMM(ctx context.Context, mm float64) error {
	if err := in.must(drivers.RoleStage); err != nil {
		return err
	}
	l := in.s.limits
	return in.moveTo(ctx, axis{name: "stage_mm", unit: "mm", min: l.StageMinMM, max: l.StageMaxMM, speed: l.StageSpeedMMPerS, accel: l.StageAccelMMPerS2}, mm)
}

// positionMM reads a stage's position.
func (in *Instrument) positionMM(ctx context.Context) (float64, error) {
	if err := in.must(drivers.RoleStage); err != nil {
		return 0, err
	}
	return in.position(ctx)
}

// setAngleDeg rotates an attenuator and waits for it to arrive.
func (in *Instrument) setAngleDeg(ctx context.Context, deg float64) error {
	if err := in.must(drivers.RoleAttenuator); err != nil {
		return err
	}
	l := in.s.limits
	return in.moveTo(ctx, axis{name: "angle_deg", unit: "deg", min: l.AngleMinDeg, max: l.AngleMaxDeg, speed: l.RotationSpeedDegPerS}, deg)
}

// angleDeg reads an attenuator's angle.
func (in *Instrument) angleDeg(ctx context.Context) (float64, error) {
	if err := in.must(drivers.RoleAttenuator); err != nil {
		return 0, err
	}
	return in.position(ctx)
}

// setDetuningMeV tunes a laser and waits until it reports the detuning.
func (in *Instrument) setDetuningMeV(ctx context.Context, mev float64) error {
	if err := in.must(drivers.RoleLaser); err != nil {
		return err
	}
	l := in.s.limits
	return in.moveTo(ctx, axis{name: "detuning_mev", unit: "meV", min: l.DetuningMinMeV, max: l.DetuningMaxMeV, speed: l.DetuningSpeedMeVPerS}, mev)
}

// detuningMeV reads a laser's detuning.
func (in *Instrument) detuningMeV(ctx context.Context) (float64, error) {
	if err := in.must(drivers.RoleLaser); err != nil {
		return 0, err
	}
	return in.position(ctx)
}

// powerUW reads a power meter, converting SI prefixes of W to µW.
func (in *Instrument) powerUW(ctx context.Context) (float64, error) {
	if err := in.must(drivers.RolePowerMeter); err != nil {
		return 0, err
	}
	return in.readNumber(ctx, "read power", in.s.Commands.Read, "uW", 0)
}

// temperatureK reads a thermometer.
func (in *Instrument) temperatureK(ctx context.Context) (float64, error) {
	if err := in.must(drivers.RoleThermometer); err != nil {
		return 0, err
	}
	return in.readNumber(ctx, "read temperature", in.s.Commands.Read, "K", 0)
}

// setSetpointK sets a thermometer's setpoint (idempotent: retried).
func (in *Instrument) setSetpointK(ctx context.Context, k float64) error {
	if err := in.must(drivers.RoleThermometer); err != nil {
		return err
	}
	if in.s.Commands.Setpoint.IsZero() {
		return in.errf("set setpoint: the bench file gives no setpoint command")
	}
	l := in.s.limits
	if (l.TemperatureMinK != 0 || l.TemperatureMaxK != 0) && (k < l.TemperatureMinK || k > l.TemperatureMaxK || math.IsNaN(k)) {
		return in.errf("setpoint_k %g outside [%g, %g] K: %w", k, l.TemperatureMinK, l.TemperatureMaxK, drivers.ErrLimit)
	}
	cmd, err := in.s.Commands.Setpoint.Render(in.vars(k))
	if err != nil {
		return in.wrap("set setpoint", err)
	}
	_, err = retry(ctx, in, "set setpoint", func() (struct{}, error) {
		return struct{}{}, in.command(ctx, "set setpoint", cmd, 0)
	})
	return err
}

// channels names the counter's channels.
func (in *Instrument) channels() []string { return append([]string(nil), in.s.Channels...) }

// count opens the gate and returns the counts per channel. With a gate
// command, the gate is sent, the gate time waited, then count is read;
// otherwise count carries the gate and its reply comes at the gate's end.
func (in *Instrument) count(ctx context.Context, gate time.Duration) ([]uint64, error) {
	if err := in.must(drivers.RoleCounter); err != nil {
		return nil, err
	}
	if gate <= 0 {
		return nil, in.errf("count: gate_ms %g must be > 0", float64(gate)/1e6)
	}
	c := in.s.Commands
	v := Vars{Axis: in.s.Axis, GateMS: float64(gate) / float64(time.Millisecond)}
	what := fmt.Sprintf("count for %v", gate)
	return retry(ctx, in, what, func() ([]uint64, error) {
		extra := gate
		if !c.Gate.IsZero() {
			gcmd, err := c.Gate.Render(v)
			if err != nil {
				return nil, err
			}
			if err := in.command(ctx, "open gate", gcmd, 0); err != nil {
				return nil, err
			}
			if err := sleep(ctx, gate); err != nil {
				return nil, err
			}
			extra = 0
		}
		cmd, err := c.Count.Send.Render(v)
		if err != nil {
			return nil, err
		}
		got, err := in.exchange(ctx, cmd, true, extra)
		if err != nil {
			return nil, err
		}
		return ParseCounts(got, c.Count.Pattern, in.s.Channels)
	})
}
