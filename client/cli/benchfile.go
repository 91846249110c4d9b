package cli

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"strings"
	"text/tabwriter"
	"time"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/benchfile"
	"github.com/gliss-lab/gliss/drivers/lineproto"
	_ "github.com/gliss-lab/gliss/sim/bench" // the "sim" driver for bench files
)

func init() {
	register("bench", benchSummary, &Command{
		Name: "check", Summary: "validate a bench file; with --probe open each instrument, identify it and read it",
		Usage:   "FILE [--probe] [--timeout D]",
		Example: "gliss bench check lab.yaml --probe",
		Run:     runBenchCheck,
	})
	register("bench", benchSummary, &Command{
		Name: "example", Summary: "print a commented bench file to start from (the simulated bench, real instruments in comments)",
		Usage:   "",
		Example: "gliss bench example > lab.yaml",
		Run:     runBenchExample,
	})
}

func runBenchExample(ctx context.Context, env *Env, args []string) error {
	c := groups["bench"].Commands["example"]
	fs := NewFlagSet(env, "bench", c)
	if err := Parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return Usagef("gliss bench example: takes no arguments (got %q)", fs.Arg(0))
	}
	_, err := io.WriteString(env.Stdout, benchfile.Example)
	return err
}

// splitFile takes the one positional argument from anywhere among the flags.
func splitFile(args []string) (file string, rest []string, err error) {
	for i := 0; i < len(args); i++ {
		a := args[i]
		if a == "--" && i+1 < len(args) {
			rest = append(rest, args[i+1:]...)
			break
		}
		if strings.HasPrefix(a, "-") {
			rest = append(rest, a)
			if (a == "--timeout" || a == "-timeout") && i+1 < len(args) {
				rest = append(rest, args[i+1])
				i++
			}
			continue
		}
		if file != "" {
			return "", nil, Usagef("gliss bench check: one FILE only (got %q and %q)", file, a)
		}
		file = a
	}
	return file, rest, nil
}

func runBenchCheck(ctx context.Context, env *Env, args []string) error {
	c := groups["bench"].Commands["check"]
	fs := NewFlagSet(env, "bench", c)
	probe := fs.Bool("probe", false, "open each instrument, identify it and read its state")
	timeout := fs.Duration("timeout", 30*time.Second, "give up probing one instrument after this long")
	file, rest, err := splitFile(args)
	if err != nil {
		return err
	}
	if err := Parse(fs, rest); err != nil {
		return err
	}
	if file == "" {
		return Usagef("gliss bench check: FILE missing (a bench file; see gliss bench example)")
	}
	if *timeout <= 0 {
		return Usagef("--timeout %v: must be > 0", *timeout)
	}
	data, err := os.ReadFile(file)
	if err != nil {
		return Usagef("gliss bench check: %v", err)
	}
	f, err := benchfile.Parse(file, data)
	if err != nil {
		return Usagef("%v", err)
	}
	fmt.Fprintf(env.Stdout, "bench %q (%s): %d instruments, file valid\n", f.Bench, file, len(f.Instruments))
	tw := tabwriter.NewWriter(env.Stdout, 2, 4, 2, ' ', 0)
	if !*probe {
		fmt.Fprintln(tw, "NAME\tROLE\tDRIVER\tLINK\tLIMITS")
		for _, in := range f.Instruments {
			fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\n", in.Name, in.Role, in.Driver, linkOf(in), limitsText(in.Role, in.Limits))
		}
		return tw.Flush()
	}
	fmt.Fprintln(tw, "NAME\tROLE\tDRIVER\tIDENTITY\tSTATE")
	failed := 0
	for _, in := range f.Instruments {
		id, state, err := probeOne(ctx, f, in, *timeout)
		if err != nil {
			failed++
			state = "FAILED: " + strings.ReplaceAll(err.Error(), "\n", "; ")
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\n", in.Name, in.Role, in.Driver, id, state)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	if failed > 0 {
		return fmt.Errorf("gliss bench check: %d of %d instruments failed the probe", failed, len(f.Instruments))
	}
	return nil
}

func linkOf(in benchfile.Instrument) string {
	s, ok := in.Settings.(*lineproto.Settings)
	if !ok {
		return "-"
	}
	t := s.Transport
	switch {
	case t.Serial != "":
		baud := t.Baud
		if baud == 0 {
			baud = 9600
		}
		return fmt.Sprintf("serial %s @%d", t.Serial, baud)
	case t.TCP != "":
		return "tcp " + t.TCP
	}
	return "replay " + t.Replay
}

func limitsText(r drivers.Role, l drivers.Limits) string {
	switch r {
	case drivers.RoleStage:
		return fmt.Sprintf("%g–%g mm, %g mm/s", l.StageMinMM, l.StageMaxMM, l.StageSpeedMMPerS)
	case drivers.RoleAttenuator:
		return fmt.Sprintf("%g–%g deg, %g deg/s", l.AngleMinDeg, l.AngleMaxDeg, l.RotationSpeedDegPerS)
	case drivers.RolePowerMeter:
		if l.PowerMaxUW > 0 {
			return fmt.Sprintf("≤ %g µW", l.PowerMaxUW)
		}
	case drivers.RoleCounter:
		var parts []string
		for ch, v := range l.CountRateMaxHz {
			parts = append(parts, fmt.Sprintf("%s ≤ %g Hz", ch, v))
		}
		if len(parts) > 0 {
			return strings.Join(sortedStrings(parts), ", ")
		}
	case drivers.RoleLaser:
		return fmt.Sprintf("%g–%g meV", l.DetuningMinMeV, l.DetuningMaxMeV)
	case drivers.RoleThermometer:
		return fmt.Sprintf("%g–%g K", l.TemperatureMinK, l.TemperatureMaxK)
	}
	return "-"
}

func sortedStrings(s []string) []string {
	for i := 1; i < len(s); i++ {
		for j := i; j > 0 && s[j] < s[j-1]; j-- {
			s[j], s[j-1] = s[j-1], s[j]
		}
	}
	return s
}

// probeOne opens one instrument alone, identifies it and reads its state.
func probeOne(ctx context.Context, f *benchfile.File, in benchfile.Instrument, timeout time.Duration) (id, state string, err error) {
	ctx, cancel := context.WithTimeout(ctx, timeout)
	defer cancel()
	one := &benchfile.File{Path: f.Path, Bench: f.Bench, Calibration: f.Calibration, Instruments: []benchfile.Instrument{in}}
	b, err := benchfile.Open(ctx, one, benchfile.Options{Logger: discardLogger()})
	if err != nil {
		return "-", "", err
	}
	defer b.Close()
	e := b.Entries[0]
	id = "-"
	if idf, ok := e.Inst.(drivers.Identifier); ok {
		if s, err := idf.Identify(ctx); err == nil {
			id = s
		} else {
			id = "(identify failed)"
		}
	}
	switch e.Role {
	case drivers.RoleStage:
		v, err := e.Inst.(drivers.Stage).PositionMM(ctx)
		return id, fmt.Sprintf("at %.4f mm", v), err
	case drivers.RoleAttenuator:
		v, err := e.Inst.(drivers.Attenuator).AngleDeg(ctx)
		if err == nil && f.Calibration.Attenuator.PMaxUW > 0 {
			return id, fmt.Sprintf("at %.3f deg (%.4g µW by the calibration)", v, f.Calibration.Attenuator.PowerUW(v)), nil
		}
		return id, fmt.Sprintf("at %.3f deg", v), err
	case drivers.RolePowerMeter:
		v, err := e.Inst.(drivers.PowerMeter).PowerUW(ctx)
		return id, fmt.Sprintf("reads %.4g µW", v), err
	case drivers.RoleLaser:
		v, err := e.Inst.(drivers.Laser).DetuningMeV(ctx)
		return id, fmt.Sprintf("detuning %.4f meV", v), err
	case drivers.RoleThermometer:
		v, err := e.Inst.(drivers.Thermometer).TemperatureK(ctx)
		return id, fmt.Sprintf("%.3f K", v), err
	case drivers.RoleCounter:
		ctr := e.Inst.(drivers.Counter)
		const gate = 100 * time.Millisecond
		counts, err := ctr.Count(ctx, gate)
		if err != nil {
			return id, "", err
		}
		var parts []string
		for i, ch := range ctr.Channels() {
			if i < len(counts) {
				parts = append(parts, fmt.Sprintf("%s %d", ch, counts[i]))
			}
		}
		return id, fmt.Sprintf("%s in a %v gate", strings.Join(parts, ", "), gate), nil
	}
	return id, "", errors.New("unknown role")
}

func discardLogger() *slog.Logger { return slog.New(slog.DiscardHandler) }
