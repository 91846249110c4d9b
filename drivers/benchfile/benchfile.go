// Package benchfile reads gliss bench files: YAML documents that describe
// each instrument of a bench (name, role, driver, limits, driver settings)
// and the bench's calibration. Unknown keys, wrong types and missing
// fields are errors naming the file, the line and the key.
//
// Each driver decodes its own settings section: a driver that implements
// SettingsMaker returns a value to decode into (its defaults filled in),
// and the value may implement RoleChecker, LimitsTaker, RecorderTaker and
// LoggerTaker.
// So a new driver is one file that registers itself; this package needs no
// change for it.
package benchfile

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"slices"
	"strings"

	"go.yaml.in/yaml/v3"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/benchfile/yamlnode"
	"github.com/gliss-lab/gliss/drivers/calib"
	_ "github.com/gliss-lab/gliss/drivers/lineproto" // the lineproto and scpi drivers
	"github.com/gliss-lab/gliss/drivers/transport"
)

// SettingsMaker is implemented by drivers that take a settings section.
type SettingsMaker interface {
	NewSettings() any
}

// RoleChecker is implemented by settings that depend on the role; it
// records errors in d with the lines of n.
type RoleChecker interface {
	CheckRole(d *yamlnode.Decoder, n *yaml.Node, key string, role drivers.Role)
}

// LimitsTaker is implemented by settings that use the instrument's limits.
type LimitsTaker interface{ SetLimits(drivers.Limits) }

// RecorderTaker is implemented by settings whose transport can record.
type RecorderTaker interface{ SetRecorder(*transport.Recorder) }

// LoggerTaker is implemented by settings of drivers that log (retries,
// reconnections); Open gives them Options.Logger.
type LoggerTaker interface{ SetLogger(*slog.Logger) }

// File is a parsed, validated bench file. Nothing is opened.
type File struct {
	// Path is the file name used in errors.
	Path        string
	Bench       string
	Calibration drivers.Calibration
	Instruments []Instrument
}

// Instrument is one instrument of a bench file.
type Instrument struct {
	Name   string
	Role   drivers.Role
	Driver string
	Limits drivers.Limits
	// Settings is the driver's decoded settings (nil for a driver without).
	Settings any
	// Line is the line of the instrument's entry.
	Line int
}

type fileFields struct {
	Bench       string       `bench:"bench,required"`
	Calibration *calibFields `bench:"calibration"`
	Instruments []*yaml.Node `bench:"instruments,required"`
}

type calibFields struct {
	Stretcher  *stretcherFields `bench:"stretcher"`
	Attenuator *malusFields     `bench:"attenuator"`
}

type stretcherFields struct {
	LinesPerMM   float64  `bench:"lines_per_mm,required"`
	WavelengthNM float64  `bench:"wavelength_nm,required"`
	Littrow      bool     `bench:"littrow"`
	IncidenceDeg *float64 `bench:"incidence_deg"`
	Order        int      `bench:"order"`
	Passes       int      `bench:"passes,required"`
	Lever        float64  `bench:"lever,required"`
	ZeroMM       float64  `bench:"zero_mm,required"`
	Sign         int      `bench:"sign"`
}

type malusFields struct {
	PMinUW    float64 `bench:"pmin_uw,required"`
	PMaxUW    float64 `bench:"pmax_uw,required"`
	Theta0Deg float64 `bench:"theta0_deg,required"`
}

type instrumentFields struct {
	Name     string     `bench:"name,required"`
	Role     string     `bench:"role,required"`
	Driver   string     `bench:"driver,required"`
	Limits   *yaml.Node `bench:"limits"`
	Settings *yaml.Node `bench:"settings"`
}

type stageLimits struct {
	MinMM        float64 `bench:"min_mm,required"`
	MaxMM        float64 `bench:"max_mm,required"`
	SpeedMMPerS  float64 `bench:"speed_mm_per_s,required"`
	AccelMMPerS2 float64 `bench:"accel_mm_per_s2"`
}

type attenuatorLimits struct {
	MinDeg       float64 `bench:"min_deg,required"`
	MaxDeg       float64 `bench:"max_deg,required"`
	SpeedDegPerS float64 `bench:"speed_deg_per_s,required"`
	MaxPowerUW   float64 `bench:"max_power_uw"`
}

type powerLimits struct {
	MaxPowerUW float64 `bench:"max_power_uw"`
}

type counterLimits struct {
	MaxRateHz map[string]float64 `bench:"max_rate_hz"`
}

type laserLimits struct {
	MinMeV       float64 `bench:"min_mev,required"`
	MaxMeV       float64 `bench:"max_mev,required"`
	SpeedMeVPerS float64 `bench:"speed_mev_per_s"`
}

type thermoLimits struct {
	MinK          float64 `bench:"min_k,required"`
	MaxK          float64 `bench:"max_k,required"`
	TimeConstantS float64 `bench:"time_constant_s"`
}

var roles = []drivers.Role{drivers.RoleStage, drivers.RoleAttenuator, drivers.RolePowerMeter,
	drivers.RoleCounter, drivers.RoleLaser, drivers.RoleThermometer}

// Parse decodes and validates a bench file. name is the file name used in
// errors. All problems found are returned together (errors.Join), each a
// *yamlnode.Error.
func Parse(name string, data []byte) (*File, error) {
	var root yaml.Node
	if err := yaml.Unmarshal(data, &root); err != nil {
		return nil, fmt.Errorf("%s: %w", name, err)
	}
	d := &yamlnode.Decoder{File: name}
	if root.Kind == 0 || len(root.Content) == 0 {
		d.Errorf(&yaml.Node{Line: 1}, "", "the file is empty")
		return nil, d.Err()
	}
	var ff fileFields
	d.Decode(&root, "", &ff)
	f := &File{Path: name, Bench: ff.Bench}
	top := root.Content[0]
	if ff.Calibration != nil {
		f.Calibration = decodeCalibration(d, yamlnode.Child(top, "calibration"), ff.Calibration)
	}
	names := map[string]int{}
	for i, n := range ff.Instruments {
		key := fmt.Sprintf("instruments[%d]", i)
		in, ok := decodeInstrument(d, n, key)
		if !ok {
			continue
		}
		if prev, dup := names[in.Name]; dup {
			d.Errorf(yamlnode.Child(n, "name"), key+".name", "%q is already the name of the instrument at line %d", in.Name, prev)
			continue
		}
		names[in.Name] = in.Line
		f.Instruments = append(f.Instruments, in)
	}
	if ff.Instruments != nil && len(ff.Instruments) == 0 {
		d.Errorf(yamlnode.Child(top, "instruments"), "instruments", "the list is empty")
	}
	has := func(r drivers.Role) bool {
		return slices.ContainsFunc(f.Instruments, func(in Instrument) bool { return in.Role == r })
	}
	if has(drivers.RoleStage) && (ff.Calibration == nil || ff.Calibration.Stretcher == nil) {
		d.Errorf(top, "calibration.stretcher", "missing (a bench with a stage needs the stretcher geometry)")
	}
	if has(drivers.RoleAttenuator) && (ff.Calibration == nil || ff.Calibration.Attenuator == nil) {
		d.Errorf(top, "calibration.attenuator", "missing (a bench with an attenuator needs its Malus fit)")
	}
	if err := d.Err(); err != nil {
		return nil, err
	}
	return f, nil
}

func decodeCalibration(d *yamlnode.Decoder, n *yaml.Node, c *calibFields) drivers.Calibration {
	var out drivers.Calibration
	if s := c.Stretcher; s != nil {
		st := calib.Stretcher{LinesPerMM: s.LinesPerMM, WavelengthNM: s.WavelengthNM, Littrow: s.Littrow,
			Order: s.Order, Passes: s.Passes, Lever: s.Lever, ZeroMM: s.ZeroMM, Sign: s.Sign}
		sn := yamlnode.Child(n, "stretcher")
		switch {
		case s.IncidenceDeg != nil && s.Littrow:
			d.Errorf(yamlnode.Child(sn, "incidence_deg"), "calibration.stretcher.incidence_deg", "give either littrow: true or incidence_deg, not both")
		case s.IncidenceDeg != nil:
			st.IncidenceDeg = *s.IncidenceDeg
		case !s.Littrow:
			d.Errorf(sn, "calibration.stretcher.incidence_deg", "missing (or set littrow: true)")
		}
		if s.Sign != 0 && s.Sign != 1 && s.Sign != -1 {
			d.Errorf(yamlnode.Child(sn, "sign"), "calibration.stretcher.sign", "%d: want +1 or -1", s.Sign)
		}
		if s.Order < 0 || s.Order > 10 {
			d.Errorf(yamlnode.Child(sn, "order"), "calibration.stretcher.order", "%d outside [1, 10]", s.Order)
		}
		if _, err := st.SlopePS2PerMM(); err != nil {
			d.Errorf(sn, "calibration.stretcher", "%v", err)
		}
		out.Stretcher = st
	}
	if m := c.Attenuator; m != nil {
		an := yamlnode.Child(n, "attenuator")
		if m.PMinUW < 0 || m.PMaxUW <= m.PMinUW {
			d.Errorf(yamlnode.Child(an, "pmax_uw"), "calibration.attenuator.pmax_uw", "%g: want pmax_uw > pmin_uw (%g) ≥ 0", m.PMaxUW, m.PMinUW)
		}
		out.Attenuator = calib.Malus{PMinUW: m.PMinUW, PMaxUW: m.PMaxUW, Theta0Deg: m.Theta0Deg}
	}
	return out
}

func decodeInstrument(d *yamlnode.Decoder, n *yaml.Node, key string) (Instrument, bool) {
	before := len(d.Errors())
	var f instrumentFields
	d.Decode(n, key, &f)
	if len(d.Errors()) > before {
		return Instrument{}, false
	}
	in := Instrument{Name: f.Name, Role: drivers.Role(f.Role), Driver: f.Driver, Line: n.Line}
	if in.Name == "" || strings.ContainsAny(in.Name, " \t/") {
		d.Errorf(yamlnode.Child(n, "name"), key+".name", "%q: want a word without spaces or slashes", in.Name)
	}
	if !slices.Contains(roles, in.Role) {
		d.Errorf(yamlnode.Child(n, "role"), key+".role", "%q: want one of %s", f.Role, roleList())
		return in, false
	}
	in.Limits = decodeLimits(d, f.Limits, key+".limits", in.Role, n)
	drv, err := drivers.Lookup(f.Driver)
	if err != nil {
		d.Errorf(yamlnode.Child(n, "driver"), key+".driver", "%v", err)
		return in, false
	}
	if !slices.Contains(drv.Roles(), in.Role) {
		d.Errorf(yamlnode.Child(n, "role"), key+".role", "driver %q cannot open a %s (its roles: %v)", f.Driver, in.Role, drv.Roles())
		return in, false
	}
	sk := key + ".settings"
	if mk, ok := drv.(SettingsMaker); ok {
		s := mk.NewSettings()
		sn := f.Settings
		if sn == nil {
			sn = &yaml.Node{Kind: yaml.MappingNode, Line: n.Line}
		}
		d.Decode(sn, sk, s)
		if rc, ok := s.(RoleChecker); ok {
			rc.CheckRole(d, sn, sk, in.Role)
		}
		if lt, ok := s.(LimitsTaker); ok {
			lt.SetLimits(in.Limits)
		}
		in.Settings = s
	} else if f.Settings != nil {
		d.Errorf(f.Settings, sk, "driver %q takes no settings", f.Driver)
	}
	return in, len(d.Errors()) == before
}

func roleList() string {
	s := make([]string, len(roles))
	for i, r := range roles {
		s[i] = string(r)
	}
	return strings.Join(s, ", ")
}

func decodeLimits(d *yamlnode.Decoder, n *yaml.Node, key string, role drivers.Role, parent *yaml.Node) drivers.Limits {
	var l drivers.Limits
	empty := n == nil
	if empty {
		n = &yaml.Node{Kind: yaml.MappingNode, Line: parent.Line}
	}
	rangeCheck := func(lo, hi float64, k string) {
		if hi <= lo {
			d.Errorf(yamlnode.Child(n, k), yamlnode.Key(key, k), "%g: must be above the minimum %g", hi, lo)
		}
	}
	positive := func(v float64, k string) {
		if v <= 0 {
			d.Errorf(yamlnode.Child(n, k), yamlnode.Key(key, k), "%g: must be > 0", v)
		}
	}
	before := len(d.Errors())
	switch role {
	case drivers.RoleStage:
		var s stageLimits
		d.Decode(n, key, &s)
		if len(d.Errors()) == before {
			rangeCheck(s.MinMM, s.MaxMM, "max_mm")
			positive(s.SpeedMMPerS, "speed_mm_per_s")
			if s.AccelMMPerS2 < 0 {
				d.Errorf(yamlnode.Child(n, "accel_mm_per_s2"), yamlnode.Key(key, "accel_mm_per_s2"), "%g: must be ≥ 0", s.AccelMMPerS2)
			}
		}
		l.StageMinMM, l.StageMaxMM, l.StageSpeedMMPerS, l.StageAccelMMPerS2 = s.MinMM, s.MaxMM, s.SpeedMMPerS, s.AccelMMPerS2
	case drivers.RoleAttenuator:
		var a attenuatorLimits
		d.Decode(n, key, &a)
		if len(d.Errors()) == before {
			rangeCheck(a.MinDeg, a.MaxDeg, "max_deg")
			positive(a.SpeedDegPerS, "speed_deg_per_s")
		}
		l.AngleMinDeg, l.AngleMaxDeg, l.RotationSpeedDegPerS, l.PowerMaxUW = a.MinDeg, a.MaxDeg, a.SpeedDegPerS, a.MaxPowerUW
	case drivers.RolePowerMeter:
		var p powerLimits
		d.Decode(n, key, &p)
		l.PowerMaxUW = p.MaxPowerUW
	case drivers.RoleCounter:
		var c counterLimits
		d.Decode(n, key, &c)
		for ch, v := range c.MaxRateHz {
			if v <= 0 {
				d.Errorf(yamlnode.Child(yamlnode.Child(n, "max_rate_hz"), ch), yamlnode.Key(key, "max_rate_hz."+ch), "%g: must be > 0", v)
			}
		}
		l.CountRateMaxHz = c.MaxRateHz
	case drivers.RoleLaser:
		var s laserLimits
		d.Decode(n, key, &s)
		if len(d.Errors()) == before {
			rangeCheck(s.MinMeV, s.MaxMeV, "max_mev")
		}
		l.DetuningMinMeV, l.DetuningMaxMeV, l.DetuningSpeedMeVPerS = s.MinMeV, s.MaxMeV, s.SpeedMeVPerS
	case drivers.RoleThermometer:
		var t thermoLimits
		d.Decode(n, key, &t)
		if len(d.Errors()) == before {
			rangeCheck(t.MinK, t.MaxK, "max_k")
			if t.TimeConstantS < 0 {
				d.Errorf(yamlnode.Child(n, "time_constant_s"), yamlnode.Key(key, "time_constant_s"), "%g: must be ≥ 0", t.TimeConstantS)
			}
		}
		l.TemperatureMinK, l.TemperatureMaxK, l.TemperatureTimeConstantS = t.MinK, t.MaxK, t.TimeConstantS
	}
	if empty && len(d.Errors()) > before {
		// Point missing-limits errors at the instrument, key "limits".
		errs := d.Errors()[before:]
		for _, e := range errs {
			if ye, ok := e.(*yamlnode.Error); ok {
				ye.Line = parent.Line
			}
		}
	}
	return l
}

// Options configure Load.
type Options struct {
	// RecordDir, if set, records every transaction of every instrument
	// whose driver can record, as JSON lines in a new file in that folder.
	RecordDir string
	// Logger receives the loader's logs (nil: slog.Default()).
	Logger *slog.Logger
}

// Load reads the bench file at path, opens every instrument and returns
// the bench, ready to use. On any error, what was opened is closed.
func Load(ctx context.Context, path string, opts Options) (*drivers.Bench, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("bench file: %w", err)
	}
	f, err := Parse(path, data)
	if err != nil {
		return nil, err
	}
	return Open(ctx, f, opts)
}

// Open opens the instruments of a parsed file.
func Open(ctx context.Context, f *File, opts Options) (*drivers.Bench, error) {
	log := opts.Logger
	if log == nil {
		log = slog.Default()
	}
	var rec *transport.Recorder
	if opts.RecordDir != "" {
		var err error
		if rec, err = transport.NewRecorder(opts.RecordDir); err != nil {
			return nil, err
		}
		log.Info("recording transactions", "file", rec.Path())
	}
	b := &drivers.Bench{Name: f.Bench, Calibration: f.Calibration}
	for _, in := range f.Instruments {
		if rt, ok := in.Settings.(RecorderTaker); ok && rec != nil {
			rt.SetRecorder(rec)
		}
		if lt, ok := in.Settings.(LoggerTaker); ok {
			lt.SetLogger(log)
		}
		drv, err := drivers.Lookup(in.Driver)
		if err != nil {
			b.Close()
			return nil, err
		}
		inst, err := drv.Open(ctx, drivers.Config{Name: in.Name, Role: in.Role, Settings: in.Settings})
		if err != nil {
			b.Close()
			return nil, fmt.Errorf("%s:%d: instrument %q (%s, driver %s): open: %w", f.Path, in.Line, in.Name, in.Role, in.Driver, err)
		}
		b.Entries = append(b.Entries, &drivers.Entry{Name: in.Name, Role: in.Role, Driver: in.Driver, Limits: in.Limits, Inst: inst})
		log.Info("instrument open", "name", in.Name, "role", in.Role, "driver", in.Driver)
	}
	if err := b.Validate(); err != nil {
		b.Close()
		return nil, fmt.Errorf("%s: %w", f.Path, err)
	}
	return b, nil
}

// IsFileError says whether err is a problem of the file (as opposed to an
// instrument that does not answer).
func IsFileError(err error) bool {
	var ye *yamlnode.Error
	return errors.As(err, &ye)
}
