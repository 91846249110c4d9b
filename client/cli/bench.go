package cli

import (
	"bufio"
	"context"
	"fmt"
	"math"
	"strconv"
	"strings"

	"google.golang.org/protobuf/encoding/protojson"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

const benchSummary = "the instruments: list, check a bench file, example bench file"

func init() {
	register("bench", benchSummary, &Command{
		Name: "list", Summary: "list the daemon's instruments with their limits and live state",
		Usage:   "[--json] [--server ADDR]",
		Example: "gliss bench",
		Run:     runBenchList,
	})
	register("bench", benchSummary, &Command{
		Name: "set", Summary: "move or set one instrument by hand (refused while a scan holds the bench)",
		Usage:   "NAME (--stage-mm X | --gdd-ps2 G | --angle-deg A | --power-uw P | --detuning-mev D | --temperature-k T)",
		Example: "gliss bench set stage --gdd-ps2 20",
		Run:     runBenchSet,
	})
	setDefault("bench", "list")
}

func runBenchList(ctx context.Context, env *Env, args []string) error {
	c := groups["bench"].Commands["list"]
	fs := NewFlagSet(env, "bench", c)
	server := serverFlag(fs, env)
	asJSON := fs.Bool("json", false, "print protobuf JSON")
	if err := Parse(fs, args); err != nil {
		return err
	}
	cl, err := dial(ctx, *server)
	if err != nil {
		return err
	}
	defer cl.Close()
	resp, err := cl.Bench.ListInstruments(ctx, &glissv1.ListInstrumentsRequest{})
	if err != nil {
		return rpcError(err, nil)
	}
	if *asJSON {
		b, err := protojson.MarshalOptions{Multiline: true, Indent: "  "}.Marshal(resp)
		if err != nil {
			return err
		}
		fmt.Fprintln(env.Stdout, string(b))
		return nil
	}
	w := bufio.NewWriter(env.Stdout)
	defer w.Flush()
	fmt.Fprintf(w, "bench %s\n", resp.Bench)
	fmt.Fprintf(w, "%-16s %-12s %-8s %-5s %-34s %s\n", "NAME", "ROLE", "DRIVER", "OK", "STATE", "LIMITS")
	for _, in := range resp.Instruments {
		ok := "yes"
		if !in.Connected {
			ok = "NO"
		}
		fmt.Fprintf(w, "%-16s %-12s %-8s %-5s %-34s %s\n", in.Name, strings.ToLower(strings.TrimPrefix(in.Role.String(), "ROLE_")), in.Driver, ok, describeState(in.State), describeLimits(in))
		if in.LastError != "" {
			fmt.Fprintf(w, "%16s error: %s\n", "", in.LastError)
		}
	}
	return nil
}

func describeState(s *glissv1.InstrumentState) string {
	var parts []string
	if s.StageMm != nil {
		parts = append(parts, fmt.Sprintf("%.3f mm", *s.StageMm))
	}
	if s.GddPs2 != nil {
		parts = append(parts, fmt.Sprintf("%.3f ps²", *s.GddPs2))
	}
	if s.AngleDeg != nil {
		parts = append(parts, fmt.Sprintf("%.2f°", *s.AngleDeg))
	}
	if s.PowerUw != nil {
		parts = append(parts, fmt.Sprintf("%.4g µW", *s.PowerUw))
	}
	if s.MeasuredPowerUw != nil {
		parts = append(parts, fmt.Sprintf("reads %.4g µW", *s.MeasuredPowerUw))
	}
	if s.DetuningMev != nil {
		parts = append(parts, fmt.Sprintf("%+.4f meV", *s.DetuningMev))
	}
	if s.TemperatureK != nil {
		parts = append(parts, fmt.Sprintf("%.3f K", *s.TemperatureK))
	}
	if len(s.Channels) > 0 {
		parts = append(parts, "channels "+strings.Join(s.Channels, ","))
	}
	return strings.Join(parts, ", ")
}

func describeLimits(in *glissv1.Instrument) string {
	l := in.Limits
	switch in.Role {
	case glissv1.Role_ROLE_STAGE:
		return fmt.Sprintf("%g–%g mm (%.2f to %.2f ps²), %g mm/s", l.StageMinMm, l.StageMaxMm, l.GddMinPs2, l.GddMaxPs2, l.StageSpeedMmPerS)
	case glissv1.Role_ROLE_ATTENUATOR:
		return fmt.Sprintf("%g–%g°, %.3g–%.4g µW, %g°/s", l.AngleMinDeg, l.AngleMaxDeg, l.PowerMinUw, l.PowerMaxUw, l.RotationSpeedDegPerS)
	case glissv1.Role_ROLE_COUNTER:
		var parts []string
		for _, c := range l.CountRateMaxHz {
			parts = append(parts, fmt.Sprintf("%s ≤ %.3g /s", c.Channel, c.MaxHz))
		}
		return strings.Join(parts, ", ")
	case glissv1.Role_ROLE_LASER:
		return fmt.Sprintf("detuning %g to %g meV", l.DetuningMinMev, l.DetuningMaxMev)
	case glissv1.Role_ROLE_THERMOMETER:
		return fmt.Sprintf("%g–%g K", l.TemperatureMinK, l.TemperatureMaxK)
	}
	return ""
}

func runBenchSet(ctx context.Context, env *Env, args []string) error {
	c := groups["bench"].Commands["set"]
	fs := NewFlagSet(env, "bench", c)
	server := serverFlag(fs, env)
	targets := map[string]*string{}
	for _, n := range []string{"stage-mm", "gdd-ps2", "angle-deg", "power-uw", "detuning-mev", "temperature-k"} {
		targets[n] = fs.String(n, "", "target "+n)
	}
	if err := Parse(fs, reorderSet(args)); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return Usagef("gliss bench set: give one instrument name (gliss bench lists them)")
	}
	req := &glissv1.SetInstrumentRequest{Name: fs.Arg(0)}
	given := ""
	for n, v := range targets {
		if *v == "" {
			continue
		}
		if given != "" {
			return Usagef("gliss bench set: give one target, not --%s and --%s", given, n)
		}
		given = n
		x, err := strconv.ParseFloat(*v, 64)
		if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
			return Usagef("--%s %q: not a finite number", n, *v)
		}
		switch n {
		case "stage-mm":
			req.Target = &glissv1.SetInstrumentRequest_StageMm{StageMm: x}
		case "gdd-ps2":
			req.Target = &glissv1.SetInstrumentRequest_GddPs2{GddPs2: x}
		case "angle-deg":
			req.Target = &glissv1.SetInstrumentRequest_AngleDeg{AngleDeg: x}
		case "power-uw":
			req.Target = &glissv1.SetInstrumentRequest_PowerUw{PowerUw: x}
		case "detuning-mev":
			req.Target = &glissv1.SetInstrumentRequest_DetuningMev{DetuningMev: x}
		case "temperature-k":
			req.Target = &glissv1.SetInstrumentRequest_TemperatureSetpointK{TemperatureSetpointK: x}
		}
	}
	if given == "" {
		return Usagef("gliss bench set %s: give a target, e.g. --gdd-ps2 20", fs.Arg(0))
	}
	cl, err := dial(ctx, *server)
	if err != nil {
		return err
	}
	defer cl.Close()
	in, err := cl.Bench.SetInstrument(ctx, req)
	if err != nil {
		return rpcError(err, map[string]string{"name": "NAME", strings.ReplaceAll(given, "-", "_"): "--" + given, "temperature_setpoint_k": "--temperature-k"})
	}
	fmt.Fprintf(env.Stdout, "%s: %s\n", in.Name, describeState(in.State))
	return nil
}

func reorderSet(args []string) []string {
	var flags, pos []string
	for i := 0; i < len(args); i++ {
		a := args[i]
		if strings.HasPrefix(a, "-") && len(a) > 1 {
			flags = append(flags, a)
			if !strings.Contains(a, "=") && i+1 < len(args) && a != "--help" && a != "-h" {
				flags = append(flags, args[i+1])
				i++
			}
			continue
		}
		pos = append(pos, a)
	}
	return append(flags, pos...)
}
