package cli

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	"google.golang.org/protobuf/encoding/protojson"
	"google.golang.org/protobuf/proto"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/service/analysis"
	"github.com/gliss-lab/gliss/sim/phonon"
)

func init() {
	register("scan", scanSummary, &Command{
		Name: "analyse", Summary: "plateau robustness of a power × chirp map per chirp, the most robust chirp, π fidelity; optional model fit",
		Usage:   "ID [--json] [--fraction F] [--channel xx] [--fit [--area-scale S] [--binding-mev E] [--detuning-mev D] [--temperature-k T]]",
		Example: "gliss scan analyse 20261202T014129.548Z-9a1041\ngliss scan analyse 20261202T014129.548Z-9a1041 --fit --temperature-k 4.2 --json",
		Run:     runScanAnalyse,
	})
	register("scan", scanSummary, &Command{
		Name: "replay", Summary: "run a stored scan again on a fresh simulated bench (same seed, same calibration); prints the new id first",
		Usage:   "ID [--no-wait]",
		Example: "gliss scan replay 20261202T014129.548Z-9a1041",
		Run:     runScanReplay,
	})
	register("scan", scanSummary, &Command{
		Name: "compare", Summary: "align two scans point by point: RMS and maximum deviation per channel, difference as CSV",
		Usage:   "A B [--json] [-o diff.csv]",
		Example: "gliss scan compare 20261202T014129.548Z-9a1041 20261202T014129.611Z-5a3367 -o diff.csv",
		Run:     runScanCompare,
	})
	register("scan", scanSummary, &Command{
		Name: "theory", Summary: "the dot model's map in a scan's GDD and power axes (no instruments), as CSV",
		Usage:   "ID -o theory.csv [--channel xx|x] [--area-scale S] [--amplitude-counts A] [--background-counts B] [--temperature-k T]",
		Example: "gliss scan theory 20261202T014129.548Z-9a1041 -o theory.csv --temperature-k 4.2",
		Run:     runScanTheory,
	})
}

// reorderFlags moves flags (with their values, for flags of fs that take
// one) before the positional arguments, so that IDs may come first.
func reorderFlags(fs *flag.FlagSet, args []string) []string {
	var flags, pos []string
	for i := 0; i < len(args); i++ {
		a := args[i]
		if a == "--" {
			pos = append(pos, args[i+1:]...)
			break
		}
		if strings.HasPrefix(a, "-") && a != "-" {
			flags = append(flags, a)
			name := strings.TrimLeft(a, "-")
			if !strings.Contains(name, "=") && i+1 < len(args) {
				if f := fs.Lookup(name); f != nil {
					if bf, ok := f.Value.(interface{ IsBoolFlag() bool }); !ok || !bf.IsBoolFlag() {
						flags = append(flags, args[i+1])
						i++
					}
				}
			}
			continue
		}
		pos = append(pos, a)
	}
	return append(flags, pos...)
}

// modelFlags are the dot-model flags shared by analyse and theory.
type modelFlags struct {
	fs                                   *flag.FlagSet
	area, binding, detuning, amp, bg     *float64
	phononsK, phononAlpha, phononCutoffM *float64
}

func addModelFlags(fs *flag.FlagSet) *modelFlags {
	demo := phonon.DemoBath()
	return &modelFlags{fs: fs,
		area:          fs.Float64("area-scale", 0, "pulse-area scale Θ/π per √µW (default: the scan's pulse-area calibration)"),
		binding:       fs.Float64("binding-mev", 0, "biexciton binding energy, meV (default: the demo dot's 4.1)"),
		detuning:      fs.Float64("detuning-mev", 0, "laser detuning per photon, meV (default 0)"),
		amp:           fs.Float64("amplitude-counts", 0, "counts per photon per pulse (for counts beside the yield)"),
		bg:            fs.Float64("background-counts", 0, "background counts"),
		phononsK:      fs.Float64("temperature-k", -1, "include the dot's phonons at this sample temperature, K (default: no phonons)"),
		phononAlpha:   fs.Float64("phonon-alpha-ps2", demo.AlphaPS2, "phonon coupling α, ps² (with --temperature-k)"),
		phononCutoffM: fs.Float64("phonon-cutoff-mev", demo.CutoffMeV, "phonon cutoff ħωc, meV (with --temperature-k)"),
	}
}

func (m *modelFlags) model() *glissv1.DotModel {
	dm := &glissv1.DotModel{}
	if calibFlagGiven(m.fs, "area-scale") {
		dm.AreaPiPerSqrtUw = proto.Float64(*m.area)
	}
	if calibFlagGiven(m.fs, "binding-mev") {
		dm.BindingMev = proto.Float64(*m.binding)
	}
	if calibFlagGiven(m.fs, "detuning-mev") {
		dm.DetuningMev = proto.Float64(*m.detuning)
	}
	if calibFlagGiven(m.fs, "amplitude-counts") {
		dm.AmplitudeCounts = proto.Float64(*m.amp)
	}
	if calibFlagGiven(m.fs, "background-counts") {
		dm.BackgroundCounts = proto.Float64(*m.bg)
	}
	dm.Phonons = m.phonons()
	return dm
}

func (m *modelFlags) phonons() *glissv1.Phonons {
	if !calibFlagGiven(m.fs, "temperature-k") {
		return nil
	}
	return &glissv1.Phonons{AlphaPs2: *m.phononAlpha, CutoffMev: *m.phononCutoffM, TemperatureK: *m.phononsK}
}

// modelFieldFlags maps request fields to the flags that set them.
var modelFieldFlags = map[string]string{
	"model.area_pi_per_sqrt_uw": "--area-scale",
	"model.amplitude_counts":    "--amplitude-counts",
	"model.background_counts":   "--background-counts",
	"model.phonons":             "--temperature-k/--phonon-alpha-ps2/--phonon-cutoff-mev",
	"model":                     "--binding-mev/--detuning-mev",
	"phonons":                   "--temperature-k/--phonon-alpha-ps2/--phonon-cutoff-mev",
	"fraction":                  "--fraction",
	"channel":                   "--channel",
}

func printProtoJSON(w io.Writer, m proto.Message) error {
	b, err := protojson.MarshalOptions{Multiline: true, Indent: "  "}.Marshal(m)
	if err != nil {
		return err
	}
	_, err = fmt.Fprintln(w, string(b))
	return err
}

func runScanAnalyse(ctx context.Context, env *Env, args []string) error {
	c := groups["scan"].Commands["analyse"]
	fs := NewFlagSet(env, "scan", c)
	server := serverFlag(fs, env)
	asJSON := fs.Bool("json", false, "print the analysis as protobuf JSON")
	fraction := fs.Float64("fraction", 0.9, "fraction of the plateau that counts as on it (0 to 1)")
	channel := fs.String("channel", "xx", "counter channel of the biexciton line")
	fit := fs.Bool("fit", false, "also fit the dot model to the whole map (slow)")
	mf := addModelFlags(fs)
	if err := Parse(fs, reorderFlags(fs, args)); err != nil {
		return err
	}
	id, err := oneID(fs, "analyse")
	if err != nil {
		return err
	}
	if !(*fraction > 0 && *fraction < 1) {
		return Usagef("%s: --fraction %g is out of range: allowed 0 < F < 1", fs.Name(), *fraction)
	}
	cl, err := dial(ctx, *server)
	if err != nil {
		return err
	}
	defer cl.Close()
	res, err := glissv1.NewAnalysisServiceClient(cl.Conn()).AnalyseScan(ctx, &glissv1.AnalyseScanRequest{Id: id, Fraction: *fraction, Channel: *channel, Fit: *fit, Model: mf.model()})
	if err != nil {
		return rpcError(err, modelFieldFlags)
	}
	if *asJSON {
		return printProtoJSON(env.Stdout, res)
	}
	return printAnalysis(env.Stdout, res)
}

func printAnalysis(w io.Writer, res *glissv1.AnalyseScanResponse) error {
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintf(tw, "gdd_ps2\tplateau_counts\tat_uw\t≥%.0f%% from_uw\tto_uw\trange_uw\trange_decades\tfirst_max_uw\t\n", 100*res.Fraction)
	for i, ch := range res.Chirps {
		mark := ""
		if uint32(i) == res.Best {
			mark = "← most robust"
		}
		lo, hi := fmt.Sprintf("%.4g", ch.LowUw), fmt.Sprintf("%.4g", ch.HighUw)
		if ch.OpenLow {
			lo = "≤" + lo
		}
		if ch.OpenHigh {
			hi = "≥" + hi
		}
		fmt.Fprintf(tw, "%g\t%.1f\t%.4g\t%s\t%s\t%.4g\t%.3f\t%.4g\t%s\n", ch.GddPs2, ch.PlateauCounts, ch.PlateauPowerUw, lo, hi, ch.RangeUw, ch.RangeDecades, ch.FirstMaxPowerUw, mark)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintf(w, "most robust chirp  %g ps² (widest power range on the plateau)\n", res.BestGddPs2)
	fmt.Fprintf(w, "π fidelity         %.3f at %g ps² (reference: %s)\n", res.PiFidelity, res.ZeroGddPs2, res.FidelityReference)
	if f := res.Fit; f != nil {
		p, s := f.Params, f.Sigma
		fmt.Fprintf(w, "model fit          χ²/DoF %.3g (DoF %d), %d iterations, %s\n", f.RedChiSq, f.Dof, f.Iterations, f.Status)
		fmt.Fprintf(w, "  area_pi_per_sqrt_uw  %.6g ± %.2g\n  binding_mev          %.5g ± %.2g\n  detuning_mev         %.4g ± %.2g\n  amplitude_counts     %.6g ± %.2g\n  background_counts    %.4g ± %.2g\n",
			p.AreaPiPerSqrtUw, s.AreaPiPerSqrtUw, p.BindingMev, s.BindingMev, p.DetuningMev, s.DetuningMev, p.AmplitudeCounts, s.AmplitudeCounts, p.BackgroundCounts, s.BackgroundCounts)
	}
	return nil
}

// replayPollInterval is how often `scan replay` looks at the replay.
const replayPollInterval = 100 * time.Millisecond

func runScanReplay(ctx context.Context, env *Env, args []string) error {
	c := groups["scan"].Commands["replay"]
	fs := NewFlagSet(env, "scan", c)
	server := serverFlag(fs, env)
	noWait := fs.Bool("no-wait", false, "print the new id and return at once")
	if err := Parse(fs, reorderFlags(fs, args)); err != nil {
		return err
	}
	id, err := oneID(fs, "replay")
	if err != nil {
		return err
	}
	cl, err := dial(ctx, *server)
	if err != nil {
		return err
	}
	defer cl.Close()
	res, err := glissv1.NewAnalysisServiceClient(cl.Conn()).ReplayScan(ctx, &glissv1.ReplayScanRequest{Id: id})
	if err != nil {
		return rpcError(err, nil)
	}
	nid := res.GetScan().GetId()
	fmt.Fprintln(env.Stdout, nid)
	if *noWait {
		return nil
	}
	t := time.NewTicker(replayPollInterval)
	defer t.Stop()
	for {
		sc, err := cl.Get(ctx, nid)
		if err != nil {
			return rpcError(err, nil)
		}
		if client.IsTerminal(sc.State) {
			fmt.Fprintf(env.Stdout, "%s  %d points  replay of %s (seed %d, calibration version %d)\n", stateName(sc.State), sc.PointsStored, id, sc.SimSeed, sc.GetCalibration().GetVersion())
			if sc.State != glissv1.ScanState_SCAN_STATE_SUCCEEDED {
				return fmt.Errorf("replay %s ended %s: %s", nid, stateName(sc.State), sc.Reason)
			}
			return nil
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-t.C:
		}
	}
}

// comparisonOf rebuilds the analysis package's comparison from a response
// (for its CSV writer).
func comparisonOf(res *glissv1.CompareScansResponse) analysis.Comparison {
	c := analysis.Comparison{Matched: int(res.Matched), OnlyA: int(res.OnlyA), OnlyB: int(res.OnlyB)}
	for _, ch := range res.Channels {
		c.Channels = append(c.Channels, analysis.ChannelDeviation{Channel: ch.Channel, RMS: ch.Rms, MaxAbs: ch.MaxAbs, MaxAtIndex: ch.MaxAtIndex, MeanA: ch.MeanA, MeanB: ch.MeanB})
	}
	for _, r := range res.Rows {
		c.Rows = append(c.Rows, analysis.DiffRow{Index: r.Index, Values: r.Values, A: r.A, B: r.B})
	}
	return c
}

func runScanCompare(ctx context.Context, env *Env, args []string) error {
	c := groups["scan"].Commands["compare"]
	fs := NewFlagSet(env, "scan", c)
	server := serverFlag(fs, env)
	asJSON := fs.Bool("json", false, "print the deviations as JSON (without the rows)")
	out := fs.String("o", "", "write the point-by-point difference as CSV to this file (- for stdout)")
	if err := Parse(fs, reorderFlags(fs, args)); err != nil {
		return err
	}
	if fs.NArg() != 2 {
		return Usagef("gliss scan compare: give two scan ids A B (gliss scan list shows them)")
	}
	cl, err := dial(ctx, *server)
	if err != nil {
		return err
	}
	defer cl.Close()
	res, err := glissv1.NewAnalysisServiceClient(cl.Conn()).CompareScans(ctx, &glissv1.CompareScansRequest{A: fs.Arg(0), B: fs.Arg(1)})
	if err != nil {
		return rpcError(err, nil)
	}
	cmp := comparisonOf(res)
	if *out != "" {
		if err := writeFileOrStdout(env, *out, func(w io.Writer) error { return cmp.WriteCSV(w, res.AxisColumns) }); err != nil {
			return err
		}
	}
	if *asJSON {
		return calibPrintJSON(env.Stdout, cmp)
	}
	if *out == "-" {
		return nil
	}
	fmt.Fprintf(env.Stdout, "A %s  B %s: %d points matched, %d only in A, %d only in B\n", fs.Arg(0), fs.Arg(1), res.Matched, res.OnlyA, res.OnlyB)
	tw := tabwriter.NewWriter(env.Stdout, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "channel\trms(B−A)\tmax|B−A|\tat index\tmean A\tmean B")
	for _, ch := range res.Channels {
		fmt.Fprintf(tw, "%s\t%.4g\t%.4g\t%v\t%.6g\t%.6g\n", ch.Channel, ch.Rms, ch.MaxAbs, ch.MaxAtIndex, ch.MeanA, ch.MeanB)
	}
	return tw.Flush()
}

// writeFileOrStdout writes through fn to path, or to stdout for "-".
func writeFileOrStdout(env *Env, path string, fn func(io.Writer) error) error {
	if path == "-" {
		return fn(env.Stdout)
	}
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("-o %s: %w", path, err)
	}
	if err := fn(f); err != nil {
		f.Close()
		return fmt.Errorf("-o %s: %w", path, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("-o %s: %w", path, err)
	}
	return nil
}

func runScanTheory(ctx context.Context, env *Env, args []string) error {
	c := groups["scan"].Commands["theory"]
	fs := NewFlagSet(env, "scan", c)
	server := serverFlag(fs, env)
	out := fs.String("o", "", "CSV file to write (- for stdout); required")
	channel := fs.String("channel", "xx", "model channel: xx (biexciton) or x (exciton)")
	mf := addModelFlags(fs)
	if err := Parse(fs, reorderFlags(fs, args)); err != nil {
		return err
	}
	id, err := oneID(fs, "theory")
	if err != nil {
		return err
	}
	if *out == "" {
		return Usagef("%s: -o FILE is required (- for stdout)", fs.Name())
	}
	cl, err := dial(ctx, *server)
	if err != nil {
		return err
	}
	defer cl.Close()
	res, err := glissv1.NewAnalysisServiceClient(cl.Conn()).TheoryMap(ctx, &glissv1.TheoryMapRequest{Id: id, Channel: *channel, Model: mf.model()})
	if err != nil {
		return rpcError(err, modelFieldFlags)
	}
	return writeFileOrStdout(env, *out, func(w io.Writer) error { return writeTheoryCSV(w, res) })
}

// writeTheoryCSV writes one row per (GDD, power): gdd_ps2, power_uw,
// area_pi, yield_<channel> and, when an amplitude was known,
// counts_<channel>.
func writeTheoryCSV(w io.Writer, res *glissv1.TheoryMapResponse) error {
	if len(res.Yield) != len(res.GddPs2) {
		return errors.New("theory map: rows do not match the GDD axis")
	}
	var b strings.Builder
	b.WriteString("gdd_ps2,power_uw,area_pi,yield_" + res.Channel)
	if res.Counts != nil {
		b.WriteString(",counts_" + res.Channel)
	}
	b.WriteByte('\n')
	f := func(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
	s := res.GetParams().GetAreaPiPerSqrtUw()
	for i, g := range res.GddPs2 {
		for j, p := range res.PowerUw {
			b.WriteString(f(g) + "," + f(p) + "," + f(s*math.Sqrt(p)) + "," + f(res.Yield[i].Values[j]))
			if res.Counts != nil {
				b.WriteString("," + f(res.Counts[i].Values[j]))
			}
			b.WriteByte('\n')
		}
	}
	_, err := io.WriteString(w, b.String())
	return err
}
