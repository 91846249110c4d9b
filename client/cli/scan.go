package cli

import (
	"bufio"
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"google.golang.org/protobuf/encoding/protojson"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/client/npy"
	"github.com/gliss-lab/gliss/drivers/calib"
)

const scanSummary = "scans: submit, follow, control and export"

func init() {
	register("scan", scanSummary, &Command{
		Name: "map", Summary: "submit a power × chirp map (GDD slow axis, power fast axis)",
		Usage:   "--gdd-ps2 FROM:TO:N --power-uw FROM:TO:N [--spacing amplitude|power] [--gate-ms G] [--settle-ms S] [--snake] [--name NAME] [--watch]",
		Example: "gliss scan map --gdd-ps2 -20:20:41 --power-uw 0.05:100:51 --spacing amplitude --gate-ms 200 --snake --name 'map A' --watch",
		Run:     runScanMap,
	})
	register("scan", scanSummary, &Command{
		Name: "power", Summary: "submit a power sweep (Rabi curve) at a fixed GDD",
		Usage:   "--power-uw FROM:TO:N [--gdd-ps2 G] [--detuning-mev D] [--spacing amplitude|power] [common flags]",
		Example: "gliss scan power --power-uw 0.05:50:101 --spacing amplitude --gdd-ps2 0 --gate-ms 500 --watch",
		Run:     oneAxis("power", glissv1.AxisKind_AXIS_KIND_POWER_UW),
	})
	register("scan", scanSummary, &Command{
		Name: "chirp", Summary: "submit a chirp sweep (stage through the stretcher) at a fixed power",
		Usage:   "--gdd-ps2 FROM:TO:N [--power-uw P] [--detuning-mev D] [common flags]",
		Example: "gliss scan chirp --gdd-ps2 -25:25:51 --power-uw 20 --gate-ms 500 --watch",
		Run:     oneAxis("chirp", glissv1.AxisKind_AXIS_KIND_GDD_PS2),
	})
	register("scan", scanSummary, &Command{
		Name: "detuning", Summary: "submit a laser detuning sweep at a fixed GDD and power",
		Usage:   "--detuning-mev FROM:TO:N [--gdd-ps2 G] [--power-uw P] [common flags]",
		Example: "gliss scan detuning --detuning-mev -0.5:0.5:41 --gdd-ps2 20 --power-uw 25 --watch",
		Run:     oneAxis("detuning", glissv1.AxisKind_AXIS_KIND_DETUNING_MEV),
	})
	register("scan", scanSummary, &Command{
		Name: "submit", Summary: "submit a scan spec written as protobuf JSON (gliss.v1.ScanSpec)",
		Usage:   "SPEC.json [--watch] [--server ADDR]   (- reads standard input)",
		Example: `echo '{"name":"rabi","axes":[{"kind":"AXIS_KIND_POWER_UW","range":{"from":0.05,"to":50,"count":101},"spacing":"POWER_SPACING_AMPLITUDE"}],"gateMs":200}' | gliss scan submit -`,
		Run:     runScanSubmit,
	})
	register("scan", scanSummary, &Command{
		Name: "list", Summary: "list scans, newest first",
		Usage:   "[--state STATE[,STATE]] [--name TEXT] [--limit N] [--json]",
		Example: "gliss scan list --state running,paused",
		Run:     runScanList,
	})
	register("scan", scanSummary, &Command{
		Name: "show", Summary: "show one scan record (state, preview, transitions)",
		Usage:   "ID [--json]",
		Example: "gliss scan show 20261202T010203.456Z-a1b2c3 --json",
		Run:     runScanShow,
	})
	register("scan", scanSummary, &Command{
		Name: "watch", Summary: "follow a scan until it ends, with progress",
		Usage:   "ID [--from SEQ]",
		Example: "gliss scan watch 20261202T010203.456Z-a1b2c3",
		Run:     runScanWatch,
	})
	for _, c := range []struct{ name, summary, example string }{
		{"pause", "pause a scan after its current point", "gliss scan pause ID --reason 'refill cryostat'"},
		{"resume", "resume a PAUSED or INTERRUPTED scan from its first point not stored", "gliss scan resume ID"},
		{"cancel", "cancel a scan after its current point (stored points are kept)", "gliss scan cancel ID --reason 'wrong dot'"},
	} {
		register("scan", scanSummary, &Command{Name: c.name, Summary: c.summary, Usage: "ID [--reason TEXT]", Example: c.example, Run: runScanControl(c.name)})
	}
	register("scan", scanSummary, &Command{
		Name: "export", Summary: "export a scan's stored points as CSV, JSON lines or NumPy arrays",
		Usage: "ID [--format csv|jsonl|npy] -o FILE|DIR   (-o - writes standard output; npy writes a directory, or a .npz when -o ends in .npz)",
		Example: "gliss scan export 20261202T010203.456Z-a1b2c3 --format csv -o map.csv\n" +
			"gliss scan export 20261202T010203.456Z-a1b2c3 --format npy -o map.npz   (numpy.load(\"map.npz\")[\"counts_xx\"])",
		Run: runScanExport,
	})
}

// axisFlag parses FROM:TO:N, a comma-separated list, or one number.
func axisValues(flagName, s string) (client.Values, error) {
	s = strings.TrimSpace(s)
	if strings.Contains(s, ",") {
		parts := strings.Split(s, ",")
		if len(parts) > 100000 {
			return client.Values{}, Usagef("--%s: %d values, at most 100000 allowed", flagName, len(parts))
		}
		vals := make([]float64, 0, len(parts))
		for _, p := range parts {
			v, err := strconv.ParseFloat(strings.TrimSpace(p), 64)
			if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
				return client.Values{}, Usagef("--%s %q: %q is not a finite number (give FROM:TO:N or a comma-separated list)", flagName, s, p)
			}
			vals = append(vals, v)
		}
		return client.List(vals...), nil
	}
	from, to, n, err := ParseRange(s)
	if err != nil {
		return client.Values{}, Usagef("--%s %q: %v", flagName, s, err)
	}
	return client.Range(from, to, uint32(n)), nil
}

// commonFlags are the settings every submitting command takes.
type commonFlags struct {
	server        *string
	gateMS        *float64
	settleMS      *float64
	snake         *bool
	name          *string
	notes         *string
	spacing       *string
	watch         *bool
	fixedGDD      *string
	fixedPower    *string
	fixedDetuning *string
}

func addCommon(fs *flag.FlagSet, env *Env) *commonFlags {
	return &commonFlags{
		server:   serverFlag(fs, env),
		gateMS:   fs.Float64("gate-ms", 100, "counter gate per point, ms (> 0)"),
		settleMS: fs.Float64("settle-ms", 0, "wait after motion before the gate opens, ms (≥ 0)"),
		snake:    fs.Bool("snake", false, "alternate the direction of the fast axis on every pass"),
		name:     fs.String("name", "", "name to find the scan by later"),
		notes:    fs.String("notes", "", "free notes stored with the scan"),
		spacing:  fs.String("spacing", "power", "spacing of a power range: power (linear in P) or amplitude (linear in √P, i.e. pulse area)"),
		watch:    fs.Bool("watch", false, "follow the scan until it ends, with progress on stderr"),
	}
}

func (c *commonFlags) options() (client.Options, error) {
	if math.IsNaN(*c.gateMS) || *c.gateMS <= 0 {
		return client.Options{}, Usagef("--gate-ms %v: must be > 0 ms", *c.gateMS)
	}
	if math.IsNaN(*c.settleMS) || *c.settleMS < 0 {
		return client.Options{}, Usagef("--settle-ms %v: must be ≥ 0 ms", *c.settleMS)
	}
	o := client.Options{Name: *c.name, Notes: *c.notes, GateMS: *c.gateMS, SettleMS: *c.settleMS, Snake: *c.snake}
	switch *c.spacing {
	case "power", "":
	case "amplitude":
		o.AmplitudeSpacing = true
	default:
		return o, Usagef("--spacing %q: use power or amplitude", *c.spacing)
	}
	for _, f := range []struct {
		name string
		v    *string
		kind glissv1.AxisKind
	}{{"gdd-ps2", c.fixedGDD, glissv1.AxisKind_AXIS_KIND_GDD_PS2}, {"power-uw", c.fixedPower, glissv1.AxisKind_AXIS_KIND_POWER_UW}, {"detuning-mev", c.fixedDetuning, glissv1.AxisKind_AXIS_KIND_DETUNING_MEV}} {
		if f.v == nil || *f.v == "" {
			continue
		}
		v, err := strconv.ParseFloat(*f.v, 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			return o, Usagef("--%s %q: give one finite number (the fixed setting of this sweep)", f.name, *f.v)
		}
		o.Fixed = append(o.Fixed, client.Fixed(f.kind, v))
	}
	return o, nil
}

func runScanMap(ctx context.Context, env *Env, args []string) error {
	c := groups["scan"].Commands["map"]
	fs := NewFlagSet(env, "scan", c)
	gdd := fs.String("gdd-ps2", "", "GDD axis (slow), ps²: FROM:TO:N or a comma-separated list (required)")
	power := fs.String("power-uw", "", "power axis (fast), µW on the sample: FROM:TO:N or a list (required)")
	detuning := fs.String("detuning-mev", "", "fixed laser detuning, meV")
	cf := addCommon(fs, env)
	cf.fixedDetuning = detuning
	if err := Parse(fs, args); err != nil {
		return err
	}
	if *gdd == "" || *power == "" {
		return Usagef("gliss scan map: --gdd-ps2 and --power-uw are required (e.g. --gdd-ps2 -20:20:41 --power-uw 0.05:100:51)")
	}
	gv, err := axisValues("gdd-ps2", *gdd)
	if err != nil {
		return err
	}
	pv, err := axisValues("power-uw", *power)
	if err != nil {
		return err
	}
	o, err := cf.options()
	if err != nil {
		return err
	}
	spec := client.MapSpec(gv, pv, o)
	return submitAndMaybeWatch(ctx, env, cf, spec, map[string]string{
		"spec.axes[0]": "--gdd-ps2 " + *gdd, "spec.axes[1]": "--power-uw " + *power,
		"spec.gate_ms": "--gate-ms", "spec.settle_ms": "--settle-ms", "spec.name": "--name", "spec.fixed[0]": "--detuning-mev " + *detuning,
	})
}

func oneAxis(name string, kind glissv1.AxisKind) func(ctx context.Context, env *Env, args []string) error {
	return func(ctx context.Context, env *Env, args []string) error {
		c := groups["scan"].Commands[name]
		fs := NewFlagSet(env, "scan", c)
		gdd := fs.String("gdd-ps2", "", "GDD, ps²: the axis of a chirp sweep (FROM:TO:N or a list), else a fixed setting")
		power := fs.String("power-uw", "", "power on the sample, µW: the axis of a power sweep, else a fixed setting")
		det := fs.String("detuning-mev", "", "laser detuning, meV: the axis of a detuning sweep, else a fixed setting")
		var detNM, resNM *string
		if kind == glissv1.AxisKind_AXIS_KIND_DETUNING_MEV {
			detNM = fs.String("detuning-nm", "", "instead of --detuning-mev: the laser's wavelength offset from the two-photon resonance, nm (FROM:TO:N or a list; + is longer, i.e. lower energy); converted exactly with E = hc/λ")
			resNM = fs.String("resonance-nm", "785.0", "two-photon resonance wavelength for --detuning-nm, nm (the demo dot's is 785.0)")
		}
		cf := addCommon(fs, env)
		if err := Parse(fs, args); err != nil {
			return err
		}
		if detNM != nil && *detNM != "" {
			if *det != "" {
				return Usagef("gliss scan %s: give --detuning-mev or --detuning-nm, not both", name)
			}
			mev, err := nmToMeV(*detNM, *resNM)
			if err != nil {
				return err
			}
			*det = mev
		}
		axisFlag := map[glissv1.AxisKind]struct {
			name string
			v    *string
		}{
			glissv1.AxisKind_AXIS_KIND_GDD_PS2:      {"gdd-ps2", gdd},
			glissv1.AxisKind_AXIS_KIND_POWER_UW:     {"power-uw", power},
			glissv1.AxisKind_AXIS_KIND_DETUNING_MEV: {"detuning-mev", det},
		}
		ax := axisFlag[kind]
		if *ax.v == "" {
			return Usagef("gliss scan %s: --%s FROM:TO:N is required", name, ax.name)
		}
		vals, err := axisValues(ax.name, *ax.v)
		if err != nil {
			return err
		}
		fields := map[string]string{"spec.axes[0]": "--" + ax.name + " " + *ax.v, "spec.gate_ms": "--gate-ms", "spec.settle_ms": "--settle-ms", "spec.name": "--name"}
		for k, f := range axisFlag {
			if k == kind {
				continue
			}
			switch k {
			case glissv1.AxisKind_AXIS_KIND_GDD_PS2:
				cf.fixedGDD = f.v
			case glissv1.AxisKind_AXIS_KIND_POWER_UW:
				cf.fixedPower = f.v
			case glissv1.AxisKind_AXIS_KIND_DETUNING_MEV:
				cf.fixedDetuning = f.v
			}
		}
		o, err := cf.options()
		if err != nil {
			return err
		}
		for j, fx := range o.Fixed {
			fields[fmt.Sprintf("spec.fixed[%d]", j)] = "--" + axisFlag[fx.Kind].name + " " + *axisFlag[fx.Kind].v
		}
		spec := o.Spec(client.Axis(kind, vals))
		return submitAndMaybeWatch(ctx, env, cf, spec, fields)
	}
}

// nmToMeV converts a detuning axis given as laser wavelength offsets from
// the two-photon resonance (nm) to per-photon detunings (meV), as a list:
// ΔL = hc/(λres+Δλ) − hc/λres (PHYSICS.md §6).
func nmToMeV(axis, resonance string) (string, error) {
	res, err := strconv.ParseFloat(resonance, 64)
	if err != nil || math.IsNaN(res) || res < 200 || res > 2000 {
		return "", Usagef("--resonance-nm %q: give the two-photon resonance wavelength, 200 to 2000 nm", resonance)
	}
	var nm []float64
	if strings.Contains(axis, ",") {
		if nm, err = ParseList(axis); err != nil {
			return "", Usagef("--detuning-nm %q: %v", axis, err)
		}
	} else {
		from, to, n, err := ParseRange(axis)
		if err != nil {
			return "", Usagef("--detuning-nm %q: %v", axis, err)
		}
		nm = RangeValues(from, to, n)
	}
	parts := make([]string, len(nm))
	for i, d := range nm {
		if math.Abs(d) > 50 {
			return "", Usagef("--detuning-nm %q: offset %g nm, allowed -50 to 50 nm", axis, d)
		}
		parts[i] = strconv.FormatFloat(calib.DetuningMeV(res+d, res), 'g', -1, 64)
	}
	return strings.Join(parts, ","), nil // one value parses as FROM with N = 1
}

func submitAndMaybeWatch(ctx context.Context, env *Env, cf *commonFlags, spec *glissv1.ScanSpec, fields map[string]string) error {
	c, err := dial(ctx, *cf.server)
	if err != nil {
		return err
	}
	defer c.Close()
	sc, err := c.Submit(ctx, spec)
	if err != nil {
		return rpcError(err, fields)
	}
	fmt.Fprintln(env.Stdout, sc.Id)
	pv := sc.GetPreview()
	fmt.Fprintf(env.Stderr, "queued %s: %d points, about %s%s, stage travel %.1f mm\n", sc.Id, pv.GetPoints(), fmtDuration(pv.GetEstimatedDurationS()), tempNote(pv), pv.GetStageTravelMm())
	if !*cf.watch {
		return nil
	}
	return watchScan(ctx, env, c, sc.Id, 0)
}

func fmtDuration(s float64) string {
	if s < 0 || math.IsNaN(s) || math.IsInf(s, 0) {
		return "?"
	}
	d := time.Duration(s * float64(time.Second)).Round(time.Second)
	if d < time.Second {
		return fmt.Sprintf("%.2f s", s)
	}
	return d.String()
}

func runScanSubmit(ctx context.Context, env *Env, args []string) error {
	c := groups["scan"].Commands["submit"]
	fs := NewFlagSet(env, "scan", c)
	server := serverFlag(fs, env)
	watch := fs.Bool("watch", false, "follow the scan until it ends")
	if err := Parse(fs, reorder(args)); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return Usagef("gliss scan submit: give one spec file (or - for standard input)")
	}
	var data []byte
	var err error
	if name := fs.Arg(0); name == "-" {
		data, err = io.ReadAll(io.LimitReader(env.Stdin, MaxSpecBytes+1))
	} else {
		data, err = os.ReadFile(name)
	}
	if err != nil {
		return fmt.Errorf("read spec: %w", err)
	}
	spec, err := DecodeSpec(data)
	if err != nil {
		return &UsageError{Msg: fmt.Sprintf("%s: %v", fs.Arg(0), err)}
	}
	cf := &commonFlags{server: server, watch: watch}
	return submitAndMaybeWatch(ctx, env, cf, spec, nil)
}

// MaxSpecBytes bounds a spec file.
const MaxSpecBytes = 1 << 20

// DecodeSpec decodes a scan spec written as protobuf JSON. Unknown fields
// are errors.
func DecodeSpec(data []byte) (*glissv1.ScanSpec, error) {
	if len(data) > MaxSpecBytes {
		return nil, fmt.Errorf("spec is %d bytes, at most %d allowed", len(data), MaxSpecBytes)
	}
	spec := &glissv1.ScanSpec{}
	if err := (protojson.UnmarshalOptions{DiscardUnknown: false}).Unmarshal(data, spec); err != nil {
		return nil, fmt.Errorf("not a gliss.v1.ScanSpec in protobuf JSON: %v", err)
	}
	return spec, nil
}

// reorder moves flags before positional arguments so that "ID --json" parses.
func reorder(args []string) []string {
	var flags, pos []string
	for i := 0; i < len(args); i++ {
		a := args[i]
		if a == "--" {
			pos = append(pos, args[i+1:]...)
			break
		}
		if strings.HasPrefix(a, "-") && a != "-" {
			flags = append(flags, a)
			if !strings.Contains(a, "=") && i+1 < len(args) && needsValue(a) {
				flags = append(flags, args[i+1])
				i++
			}
			continue
		}
		pos = append(pos, a)
	}
	return append(flags, pos...)
}

// needsValue lists the flags of ID-taking commands that take a value.
func needsValue(flagArg string) bool {
	switch strings.TrimLeft(flagArg, "-") {
	case "server", "token-file", "ca-cert", "from", "reason", "format", "o", "state", "name", "limit", "channel", "at", "width-cm", "height-cm":
		return true
	}
	return false
}

func oneID(fs *flag.FlagSet, cmd string) (string, error) {
	if fs.NArg() != 1 {
		return "", Usagef("gliss scan %s: give one scan id (gliss scan list shows them)", cmd)
	}
	return fs.Arg(0), nil
}

func runScanList(ctx context.Context, env *Env, args []string) error {
	c := groups["scan"].Commands["list"]
	fs := NewFlagSet(env, "scan", c)
	server := serverFlag(fs, env)
	states := fs.String("state", "", "only these states, comma-separated (queued, running, paused, succeeded, failed, cancelled, interrupted)")
	name := fs.String("name", "", "only scans whose name contains this text")
	limit := fs.Int("limit", 20, "at most this many scans (1 to 1000)")
	asJSON := fs.Bool("json", false, "print protobuf JSON, one scan per line")
	if err := Parse(fs, args); err != nil {
		return err
	}
	if *limit < 1 || *limit > 1000 {
		return Usagef("--limit %d: allowed 1 to 1000", *limit)
	}
	req := &glissv1.ListScansRequest{PageSize: uint32(*limit), NameContains: *name}
	if *states != "" {
		for _, s := range strings.Split(*states, ",") {
			v, ok := glissv1.ScanState_value["SCAN_STATE_"+strings.ToUpper(strings.TrimSpace(s))]
			if !ok || v == 0 {
				return Usagef("--state %q: unknown state %q (queued, running, paused, succeeded, failed, cancelled, interrupted)", *states, s)
			}
			req.States = append(req.States, glissv1.ScanState(v))
		}
	}
	cl, err := dial(ctx, *server)
	if err != nil {
		return err
	}
	defer cl.Close()
	resp, err := cl.Scans.ListScans(ctx, req)
	if err != nil {
		return rpcError(err, map[string]string{"page_size": "--limit"})
	}
	w := bufio.NewWriter(env.Stdout)
	defer w.Flush()
	if *asJSON {
		for _, s := range resp.Scans {
			b, _ := protojson.Marshal(s)
			fmt.Fprintln(w, string(b))
		}
		return nil
	}
	fmt.Fprintf(w, "%-30s %-12s %-13s %-20s %s\n", "ID", "STATE", "POINTS", "CREATED", "NAME")
	for _, s := range resp.Scans {
		fmt.Fprintf(w, "%-30s %-12s %-13s %-20s %s\n", s.Id, stateName(s.State), fmt.Sprintf("%d/%d", s.PointsStored, s.GetPreview().GetPoints()),
			s.GetCreatedAt().AsTime().Local().Format("2006-01-02 15:04:05"), s.GetSpec().GetName())
	}
	return nil
}

func stateName(s glissv1.ScanState) string {
	return strings.TrimPrefix(s.String(), "SCAN_STATE_")
}

func runScanShow(ctx context.Context, env *Env, args []string) error {
	c := groups["scan"].Commands["show"]
	fs := NewFlagSet(env, "scan", c)
	server := serverFlag(fs, env)
	asJSON := fs.Bool("json", false, "print the record as protobuf JSON")
	if err := Parse(fs, reorder(args)); err != nil {
		return err
	}
	id, err := oneID(fs, "show")
	if err != nil {
		return err
	}
	cl, err := dial(ctx, *server)
	if err != nil {
		return err
	}
	defer cl.Close()
	sc, err := cl.Get(ctx, id)
	if err != nil {
		return rpcError(err, nil)
	}
	if *asJSON {
		b, err := protojson.MarshalOptions{Multiline: true, Indent: "  "}.Marshal(sc)
		if err != nil {
			return err
		}
		fmt.Fprintln(env.Stdout, string(b))
		return nil
	}
	w := env.Stdout
	pv := sc.GetPreview()
	fmt.Fprintf(w, "scan      %s  %q\nstate     %s  (%s)\npoints    %d of %d\nbench     %s\n", sc.Id, sc.GetSpec().GetName(), stateName(sc.State), sc.Reason, sc.PointsStored, pv.GetPoints(), sc.Bench)
	fmt.Fprintf(w, "estimate  %s%s, stage travel %.1f mm, rotation %.1f°\n", fmtDuration(pv.GetEstimatedDurationS()), tempNote(pv), pv.GetStageTravelMm(), pv.GetRotationDeg())
	for i, a := range sc.GetSpec().GetAxes() {
		fmt.Fprintf(w, "axis %d    %s %s\n", i, client.AxisColumn(a.Kind), describeValues(a))
	}
	fmt.Fprintf(w, "gate      %g ms, settle %g ms, snake %v\n", sc.GetSpec().GetGateMs(), sc.GetSpec().GetSettleMs(), sc.GetSpec().GetSnake())
	for _, t := range sc.Transitions {
		fmt.Fprintf(w, "  %s  %-11s → %-11s %s\n", t.At.AsTime().Local().Format("2006-01-02 15:04:05.000"), stateName(t.From), stateName(t.To), t.Reason)
	}
	return nil
}

func describeValues(a *glissv1.Axis) string {
	if r := a.GetRange(); r != nil {
		s := fmt.Sprintf("%g:%g:%d", r.From, r.To, r.Count)
		if a.Spacing == glissv1.PowerSpacing_POWER_SPACING_AMPLITUDE {
			s += " (amplitude spacing)"
		}
		return s
	}
	v := a.GetList().GetValues()
	if len(v) > 6 {
		return fmt.Sprintf("%d values %g … %g", len(v), v[0], v[len(v)-1])
	}
	return fmt.Sprint(v)
}

func runScanWatch(ctx context.Context, env *Env, args []string) error {
	c := groups["scan"].Commands["watch"]
	fs := NewFlagSet(env, "scan", c)
	server := serverFlag(fs, env)
	from := fs.Uint64("from", 0, "first point sequence number to show")
	if err := Parse(fs, reorder(args)); err != nil {
		return err
	}
	id, err := oneID(fs, "watch")
	if err != nil {
		return err
	}
	cl, err := dial(ctx, *server)
	if err != nil {
		return err
	}
	defer cl.Close()
	return watchScan(ctx, env, cl, id, *from)
}

// watchScan follows a scan, printing progress to stderr, and returns an
// error if the scan did not succeed.
func watchScan(ctx context.Context, env *Env, c *client.Client, id string, from uint64) error {
	pr := newProgress(env.Stderr)
	var last *glissv1.Scan
	for ev, err := range c.Watch(ctx, id, from) {
		if err != nil {
			pr.done()
			return rpcError(err, nil)
		}
		switch e := ev.Event.(type) {
		case *glissv1.ScanEvent_Scan:
			if last == nil || last.State != e.Scan.State {
				pr.line(fmt.Sprintf("%s: %s (%s)", id, stateName(e.Scan.State), e.Scan.Reason))
			}
			last = e.Scan
			pr.setTotal(e.Scan.GetPreview().GetPoints(), e.Scan.GetChannels())
		case *glissv1.ScanEvent_Point:
			pr.point(e.Point)
		case *glissv1.ScanEvent_Log:
			if e.Log.Level != "info" {
				pr.line(fmt.Sprintf("%s: %s", e.Log.Level, e.Log.Message))
			}
		}
	}
	pr.done()
	if last == nil {
		return errors.New("watch ended without a scan record")
	}
	if last.State != glissv1.ScanState_SCAN_STATE_SUCCEEDED {
		return fmt.Errorf("scan %s ended %s: %s", id, stateName(last.State), last.Reason)
	}
	return nil
}

func runScanControl(name string) func(ctx context.Context, env *Env, args []string) error {
	return func(ctx context.Context, env *Env, args []string) error {
		c := groups["scan"].Commands[name]
		fs := NewFlagSet(env, "scan", c)
		server := serverFlag(fs, env)
		reason := fs.String("reason", "", "why (recorded with the transition)")
		if err := Parse(fs, reorder(args)); err != nil {
			return err
		}
		id, err := oneID(fs, name)
		if err != nil {
			return err
		}
		cl, err := dial(ctx, *server)
		if err != nil {
			return err
		}
		defer cl.Close()
		var sc *glissv1.Scan
		switch name {
		case "pause":
			sc, err = cl.Scans.PauseScan(ctx, &glissv1.PauseScanRequest{Id: id, Reason: *reason})
		case "resume":
			sc, err = cl.Scans.ResumeScan(ctx, &glissv1.ResumeScanRequest{Id: id})
		case "cancel":
			sc, err = cl.Scans.CancelScan(ctx, &glissv1.CancelScanRequest{Id: id, Reason: *reason})
		}
		if err != nil {
			return rpcError(err, nil)
		}
		msg := stateName(sc.State)
		if name == "pause" && sc.State == glissv1.ScanState_SCAN_STATE_RUNNING {
			msg = "RUNNING (pauses after the current point)"
		}
		if name == "cancel" && sc.State == glissv1.ScanState_SCAN_STATE_RUNNING {
			msg = "RUNNING (stops after the current point)"
		}
		fmt.Fprintf(env.Stdout, "%s %s\n", sc.Id, msg)
		return nil
	}
}

func runScanExport(ctx context.Context, env *Env, args []string) error {
	c := groups["scan"].Commands["export"]
	fs := NewFlagSet(env, "scan", c)
	server := serverFlag(fs, env)
	format := fs.String("format", "csv", "csv, jsonl or npy (NumPy arrays: the axis vectors and one counts_CHANNEL array per channel shaped by the axes, NaN where no point is stored)")
	out := fs.String("o", "", "output file (- for standard output; required); for npy a directory, or a file ending in .npz")
	if err := Parse(fs, reorder(args)); err != nil {
		return err
	}
	id, err := oneID(fs, "export")
	if err != nil {
		return err
	}
	if *out == "" {
		return Usagef("gliss scan export: -o FILE is required (- for standard output)")
	}
	if *format == "npy" {
		return exportNPY(ctx, env, *server, id, *out)
	}
	write, err := exporter(*format)
	if err != nil {
		return err
	}
	cl, err := dial(ctx, *server)
	if err != nil {
		return err
	}
	defer cl.Close()
	sc, err := cl.Get(ctx, id)
	if err != nil {
		return rpcError(err, nil)
	}
	return writeOut(env, *out, func(w io.Writer) (uint64, error) {
		return write(w, sc, cl.Points(ctx, id, 0))
	})
}

type exportFunc func(io.Writer, *glissv1.Scan, func(func(*glissv1.Point, error) bool)) (uint64, error)

func exporter(format string) (exportFunc, error) {
	switch format {
	case "csv":
		return func(w io.Writer, sc *glissv1.Scan, pts func(func(*glissv1.Point, error) bool)) (uint64, error) {
			return client.WriteCSV(w, sc, pts)
		}, nil
	case "jsonl":
		return func(w io.Writer, sc *glissv1.Scan, pts func(func(*glissv1.Point, error) bool)) (uint64, error) {
			return client.WriteJSONL(w, sc, pts)
		}, nil
	}
	return nil, Usagef("--format %q: use csv, jsonl or npy", format)
}

// exportNPY writes NumPy arrays into a directory, or a .npz file.
func exportNPY(ctx context.Context, env *Env, server, id, out string) error {
	if out == "-" {
		return Usagef("--format npy -o -: NumPy arrays go to a directory or a .npz file (e.g. -o map.npz)")
	}
	cl, err := dial(ctx, server)
	if err != nil {
		return err
	}
	defer cl.Close()
	sc, err := cl.Get(ctx, id)
	if err != nil {
		return rpcError(err, nil)
	}
	if npy.IsNPZPath(out) {
		return writeOut(env, out, func(w io.Writer) (uint64, error) {
			return client.WriteNPY(npy.NewNPZ(w), sc, cl.Points(ctx, id, 0))
		})
	}
	dir, err := npy.NewDir(out)
	if err != nil {
		return fmt.Errorf("-o %s: %w", out, err)
	}
	n, err := client.WriteNPY(dir, sc, cl.Points(ctx, id, 0))
	if err != nil {
		dir.Close()
		return fmt.Errorf("-o %s: %w", out, err)
	}
	fmt.Fprintf(env.Stderr, "wrote %d points to %s (one .npy per axis and channel)\n", n, out)
	return nil
}

// writeOut writes to a file atomically (temporary file, then rename), or to stdout.
func writeOut(env *Env, path string, fn func(io.Writer) (uint64, error)) error {
	if path == "-" {
		_, err := fn(env.Stdout)
		return err
	}
	dir := filepath.Dir(path)
	tmp, err := os.CreateTemp(dir, "."+filepath.Base(path)+".*")
	if err != nil {
		return fmt.Errorf("-o %s: %w", path, err)
	}
	defer os.Remove(tmp.Name())
	bw := bufio.NewWriterSize(tmp, 1<<16)
	n, err := fn(bw)
	if err == nil {
		err = bw.Flush()
	}
	if err == nil {
		err = tmp.Sync()
	}
	if cerr := tmp.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fmt.Errorf("-o %s: %w", path, err)
	}
	if err := os.Rename(tmp.Name(), path); err != nil {
		return fmt.Errorf("-o %s: %w", path, err)
	}
	fmt.Fprintf(env.Stderr, "wrote %d points to %s\n", n, path)
	return nil
}

// tempNote tells when an estimate leaves out the sample's approach to a
// temperature setpoint (no time constant known for the thermometer).
func tempNote(pv *glissv1.Preview) string {
	if !pv.GetTemperatureApproachUnknown() {
		return ""
	}
	return fmt.Sprintf(" + the sample's approach to its temperature setpoints (%d; not known to gliss)", pv.GetTemperatureChanges())
}
