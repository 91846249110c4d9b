package lineproto

import (
	"fmt"
	"log/slog"
	"path/filepath"
	"slices"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/benchfile/yamlnode"
	"github.com/gliss-lab/gliss/drivers/transport"
)

// Settings is the "settings" section of a lineproto or scpi instrument in
// a bench file.
type Settings struct {
	Transport Transport `bench:"transport,required"`
	// Axis is substituted for {axis} (the axis of a multi-axis controller).
	Axis string `bench:"axis"`
	// Scale and Offset convert physical units (mm, deg, meV, K) to device
	// units (steps, counts): device = physical·scale + offset.
	Scale  float64 `bench:"scale"`
	Offset float64 `bench:"offset"`
	// Tolerance is how close a motion must end to its target, physical units.
	Tolerance float64 `bench:"tolerance"`
	// Retries is the number of extra attempts of an idempotent query; Backoff
	// the wait before the first retry, doubled at each next one.
	Retries int           `bench:"retries"`
	Backoff time.Duration `bench:"backoff"`
	// Poll is the interval of motion polling.
	Poll time.Duration `bench:"poll"`
	// MotionMargin is added to the motion time computed from the distance
	// and the configured speed to make the deadline of a move.
	MotionMargin time.Duration `bench:"motion_margin"`
	// Ack, if set, is the reply every set command gets ("^OK$"); without it no
	// reply is read after a set command.
	Ack *Pattern `bench:"ack"`
	// ErrorReply marks an error reply to any command ("^ERR").
	ErrorReply *Pattern `bench:"error_reply"`
	// ErrorQuery, if set, is sent after each set command; its reply must
	// match ErrorNone.
	ErrorQuery string   `bench:"error_query"`
	ErrorNone  *Pattern `bench:"error_none"`
	// Identify is sent once at connect; its reply is the identification.
	Identify string `bench:"identify"`
	// Init commands are sent at connect, after identification.
	Init []string `bench:"init"`
	// Channels names the counter channels, in the order of the counts.
	Channels []string `bench:"channels"`
	Commands Commands `bench:"commands,required"`

	flavour string
	limits  drivers.Limits
	rec     *transport.Recorder
	pool    *transport.Pool
	log     *slog.Logger
}

// Transport selects and configures the link: exactly one of serial, tcp and
// replay.
type Transport struct {
	Serial   string  `bench:"serial"`
	Baud     int     `bench:"baud"`
	DataBits int     `bench:"data_bits"`
	Parity   string  `bench:"parity"`
	StopBits float64 `bench:"stop_bits"`
	TCP      string  `bench:"tcp"`
	// Replay plays a recording (JSON lines) back as the device.
	Replay          string        `bench:"replay"`
	WriteTerminator string        `bench:"write_terminator"`
	ReadTerminator  string        `bench:"read_terminator"`
	Timeout         time.Duration `bench:"timeout"`
	// Quiet is the silence awaited after a failed transaction before the
	// next command (see transport.Framing.Quiet).
	Quiet time.Duration `bench:"quiet"`
}

type transportFields Transport

// DecodeNode implements yamlnode.Unmarshaler: it checks that exactly one
// link is named and resolves a relative replay path against the bench file.
func (t *Transport) DecodeNode(d *yamlnode.Decoder, n *yaml.Node, key string) error {
	var f transportFields = transportFields(*t)
	d.Decode(n, key, &f)
	*t = Transport(f)
	kinds := 0
	for _, s := range []string{t.Serial, t.TCP, t.Replay} {
		if s != "" {
			kinds++
		}
	}
	if kinds != 1 {
		return fmt.Errorf("name exactly one of serial, tcp and replay (got %d)", kinds)
	}
	if t.Serial != "" {
		if _, err := (transport.Serial{Port: t.Serial, Baud: t.Baud, DataBits: t.DataBits, Parity: t.Parity, StopBits: t.StopBits}).Mode(); err != nil {
			return err
		}
	} else if t.Baud != 0 || t.DataBits != 0 || t.Parity != "" || t.StopBits != 0 {
		return fmt.Errorf("baud, data_bits, parity and stop_bits belong to a serial transport")
	}
	if t.Replay != "" && !filepath.IsAbs(t.Replay) && d.File != "" {
		t.Replay = filepath.Join(filepath.Dir(d.File), t.Replay)
	}
	if t.Timeout == 0 {
		t.Timeout = time.Second
	}
	return nil
}

func (t Transport) framing() transport.Framing {
	return transport.Framing{WriteTerminator: t.WriteTerminator, ReadTerminator: t.ReadTerminator, Timeout: t.Timeout, Quiet: t.Quiet}
}

// Commands are the command templates. Which ones an instrument needs
// depends on its role:
//
//	stage, attenuator, laser:  move {value}; position; optional busy, wait, home
//	powermeter:                read (unit uW)
//	thermometer:               read (unit K); optional setpoint {value}
//	counter:                   count {gate_ms}; optional gate {gate_ms} sent first
type Commands struct {
	Move     Template
	Position *Query
	Busy     *Query
	Wait     *Query
	Home     Template
	Read     *Query
	Setpoint Template
	Gate     Template
	Count    *Query
}

var commandKeys = []string{"move", "position", "busy", "wait", "home", "read", "setpoint", "gate", "count"}

// DecodeNode implements yamlnode.Unmarshaler.
func (c *Commands) DecodeNode(d *yamlnode.Decoder, n *yaml.Node, key string) error {
	if n.Kind != yaml.MappingNode {
		return fmt.Errorf("want a mapping of commands (%s)", strings.Join(commandKeys, ", "))
	}
	seen := map[string]bool{}
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, v := n.Content[i], n.Content[i+1]
		kk := yamlnode.Key(key, k.Value)
		if seen[k.Value] {
			d.Errorf(k, kk, "given twice")
			continue
		}
		seen[k.Value] = true
		switch k.Value {
		case "move":
			c.Move = decodeTemplate(d, v, kk, "value", "axis")
		case "position":
			c.Position = decodeQuery(d, v, kk, "axis")
		case "busy":
			c.Busy = decodeQuery(d, v, kk, "axis")
		case "wait":
			c.Wait = decodeQuery(d, v, kk, "axis")
		case "home":
			c.Home = decodeTemplate(d, v, kk, "axis")
		case "read":
			c.Read = decodeQuery(d, v, kk, "axis")
		case "setpoint":
			c.Setpoint = decodeTemplate(d, v, kk, "value", "axis")
		case "gate":
			c.Gate = decodeTemplate(d, v, kk, "gate_ms", "gate_s", "axis")
		case "count":
			c.Count = decodeQuery(d, v, kk, "gate_ms", "gate_s", "axis")
		default:
			d.Errorf(k, kk, "unknown command (allowed: %s)", strings.Join(commandKeys, ", "))
		}
	}
	return nil
}

// CheckRole reports, with the file's lines, what the settings lack for role.
func (s *Settings) CheckRole(d *yamlnode.Decoder, n *yaml.Node, key string, role drivers.Role) {
	cn := yamlnode.Child(n, "commands")
	ck := yamlnode.Key(key, "commands")
	c := &s.Commands
	need := func(ok bool, name, why string) {
		if !ok {
			d.Errorf(cn, yamlnode.Key(ck, name), "missing (%s)", why)
		}
	}
	valueGroup := func(q *Query, name string) {
		if q != nil && q.Pattern != nil && q.Pattern.re != nil && q.Pattern.re.SubexpIndex("value") < 0 {
			d.Errorf(yamlnode.Child(cn, name), yamlnode.Key(ck, name+".pattern"), "pattern %q has no group (?P<value>…)", q.Pattern)
		}
	}
	for _, q := range []struct {
		q    *Query
		name string
	}{{c.Position, "position"}, {c.Read, "read"}} {
		valueGroup(q.q, q.name)
	}
	if !c.Home.IsZero() && c.Busy == nil && c.Wait == nil && s.flavour != "scpi" {
		d.Errorf(yamlnode.Child(cn, "home"), yamlnode.Key(ck, "home"), "needs a busy or wait query to know when homing is done")
	}
	if c.Busy != nil && (c.Busy.Busy == nil || c.Busy.Ready == nil) {
		d.Errorf(yamlnode.Child(cn, "busy"), yamlnode.Key(ck, "busy"), "a busy query needs both patterns, busy and ready")
	}
	forbid := func(ok bool, name string) {
		if ok {
			d.Errorf(yamlnode.Child(cn, name), yamlnode.Key(ck, name), "has no meaning for role %s", role)
		}
	}
	switch role {
	case drivers.RoleStage, drivers.RoleAttenuator, drivers.RoleLaser:
		why := "required for role " + string(role)
		need(!c.Move.IsZero(), "move", why)
		need(c.Position != nil, "position", why)
		forbid(c.Read != nil, "read")
		forbid(!c.Setpoint.IsZero(), "setpoint")
		forbid(c.Count != nil, "count")
		forbid(!c.Gate.IsZero(), "gate")
	case drivers.RolePowerMeter, drivers.RoleThermometer:
		need(c.Read != nil, "read", "required for role "+string(role))
		forbid(!c.Move.IsZero(), "move")
		forbid(c.Count != nil, "count")
		if role == drivers.RolePowerMeter {
			forbid(!c.Setpoint.IsZero(), "setpoint")
		}
	case drivers.RoleCounter:
		need(c.Count != nil, "count", "required for role counter")
		forbid(!c.Move.IsZero(), "move")
		forbid(c.Read != nil, "read")
		if len(s.Channels) == 0 {
			d.Errorf(n, yamlnode.Key(key, "channels"), "missing (a counter names its channels, such as [x, xx])")
		}
		if c.Count != nil && c.Count.Pattern != nil && c.Count.Pattern.re != nil {
			for _, ch := range s.Channels {
				if c.Count.Pattern.re.SubexpIndex(ch) < 0 {
					d.Errorf(yamlnode.Child(cn, "count"), yamlnode.Key(ck, "count.pattern"), "pattern %q has no group (?P<%s>…) for channel %s", c.Count.Pattern, ch, ch)
				}
			}
		}
		if !c.Gate.IsZero() && c.Count != nil && (c.Count.Send.Uses("gate_ms") || c.Count.Send.Uses("gate_s")) {
			d.Errorf(yamlnode.Child(cn, "count"), yamlnode.Key(ck, "count"), "with a gate command, count only reads: it takes no gate placeholder")
		}
		if c.Gate.IsZero() && c.Count != nil && !c.Count.Send.Uses("gate_ms") && !c.Count.Send.Uses("gate_s") {
			d.Errorf(yamlnode.Child(cn, "count"), yamlnode.Key(ck, "count"), "without a gate command, count must carry {gate_ms} or {gate_s}")
		}
	}
	if len(s.Channels) > 0 && role != drivers.RoleCounter {
		d.Errorf(yamlnode.Child(n, "channels"), yamlnode.Key(key, "channels"), "only a counter has channels")
	}
	if dup := firstDup(s.Channels); dup != "" {
		d.Errorf(yamlnode.Child(n, "channels"), yamlnode.Key(key, "channels"), "channel %q named twice", dup)
	}
	if s.Scale == 0 {
		d.Errorf(yamlnode.Child(n, "scale"), yamlnode.Key(key, "scale"), "must not be 0")
	}
	if s.Tolerance <= 0 {
		d.Errorf(yamlnode.Child(n, "tolerance"), yamlnode.Key(key, "tolerance"), "%g: must be > 0", s.Tolerance)
	}
	if s.Retries < 0 || s.Retries > 20 {
		d.Errorf(yamlnode.Child(n, "retries"), yamlnode.Key(key, "retries"), "%d outside [0, 20]", s.Retries)
	}
	if s.ErrorQuery != "" && s.ErrorNone == nil {
		d.Errorf(yamlnode.Child(n, "error_query"), yamlnode.Key(key, "error_none"), "missing (the reply pattern meaning \"no error\" for error_query %q)", s.ErrorQuery)
	}
}

func firstDup(s []string) string {
	for i, x := range s {
		if slices.Contains(s[:i], x) {
			return x
		}
	}
	return ""
}

// SetLimits gives the instrument its limits from the bench file (travel
// range and speed, for the refusal of out-of-range targets and the motion
// deadline).
func (s *Settings) SetLimits(l drivers.Limits) { s.limits = l }

// SetRecorder makes the instrument record every transaction.
func (s *Settings) SetRecorder(r *transport.Recorder) { s.rec = r }

// SetLogger sets the logger of the instrument and its link (retries,
// reconnections).
func (s *Settings) SetLogger(l *slog.Logger) { s.log = l }

// SetPool makes the instrument take its link from p instead of
// transport.DefaultPool.
func (s *Settings) SetPool(p *transport.Pool) { s.pool = p }

func defaultSettings(flavour string) *Settings {
	s := &Settings{
		Scale:        1,
		Tolerance:    0.01,
		Retries:      3,
		Backoff:      50 * time.Millisecond,
		Poll:         50 * time.Millisecond,
		MotionMargin: 2 * time.Second,
		flavour:      flavour,
	}
	if flavour == "scpi" {
		s.Identify = "*IDN?"
		s.ErrorQuery = "SYST:ERR?"
		// SCPI-99 §21.8: "0,\"No error\"" (the + sign is optional in
		// <NR1>; common practice, no published source for the variants).
		s.ErrorNone = MustPattern(`^\s*\+?0\s*(,|$)`)
		s.Init = []string{"*CLS"}
	}
	return s
}
