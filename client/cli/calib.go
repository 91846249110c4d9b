package cli

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/drivers/calib"
)

const calibSummary = "calibrations: stretcher GDD, energy units, fits"

func init() {
	register("calib", calibSummary, &Command{
		Name:    "stretcher",
		Summary: "GDD of a grating stretcher for a stage travel, and its ps²/mm slope",
		Usage:   "--lines-per-mm L --wavelength-nm W --passes N --lever K --travel-mm X [--incidence-deg A] [--order M] [--json]",
		Example: "gliss calib stretcher --lines-per-mm 1800 --wavelength-nm 780 --passes 2 --lever 2 --travel-mm 875",
		Run:     runCalibStretcher,
	})
	register("calib", calibSummary, &Command{
		Name:    "energy",
		Summary: "line spacing in nm ↔ energy splitting in meV near a wavelength",
		Usage:   "(--nm D | --mev E) --at-nm L [--json]",
		Example: "gliss calib energy --nm 1.9 --at-nm 785\ngliss calib energy --mev 4.1 --at-nm 785",
		Run:     runCalibEnergy,
	})
	register("calib", calibSummary, &Command{
		Name:    "attenuator",
		Summary: "fit Malus's law or an ND-wheel law to power-meter readings (CSV angle_deg,power_uw)",
		Usage:   "--readings FILE|- [--law malus|nd] [--json]",
		Example: "gliss calib attenuator --readings sweep.csv --law malus\n# sweep.csv:\n# angle_deg,power_uw\n# 0,183.2\n# 3,179.9\n# ...",
		Run:     runCalibAttenuator,
	})
	register("calib", calibSummary, &Command{
		Name:    "stretcher-fit",
		Summary: "fit slope and zero of the stretcher to pulse durations (CSV stage_mm,fwhm_ps)",
		Usage:   "--readings FILE|- [--json]",
		Example: "gliss calib stretcher-fit --readings durations.csv\n# durations.csv (intensity FWHM; divide Gaussian autocorrelation widths by √2):\n# stage_mm,fwhm_ps\n# 450,7.1\n# ...",
		Run:     runCalibStretcherFit,
	})
}

// calibFlagGiven reports whether the flag name was given on the command line.
func calibFlagGiven(fs *flag.FlagSet, name string) bool {
	set := false
	fs.Visit(func(f *flag.Flag) {
		if f.Name == name {
			set = true
		}
	})
	return set
}

// calibNeed checks that required flags were given.
func calibNeed(fs *flag.FlagSet, names ...string) error {
	for _, n := range names {
		if !calibFlagGiven(fs, n) {
			return Usagef("%s: --%s is required (see --help)", fs.Name(), n)
		}
	}
	return nil
}

// calibInRange is a UsageError unless lo ≤ v ≤ hi (and finite).
func calibInRange(fs *flag.FlagSet, name string, v, lo, hi float64, unit string) error {
	if math.IsNaN(v) || v < lo || v > hi {
		return Usagef("%s: --%s %g is out of range: allowed %g to %g%s", fs.Name(), name, v, lo, hi, unit)
	}
	return nil
}

func calibPrintJSON(w io.Writer, v any) error {
	b, err := json.MarshalIndent(v, "", "  ")
	if err != nil {
		return err
	}
	_, err = fmt.Fprintln(w, string(b))
	return err
}

func runCalibStretcher(ctx context.Context, env *Env, args []string) error {
	c := groups["calib"].Commands["stretcher"]
	fs := NewFlagSet(env, "calib", c)
	lines := fs.Float64("lines-per-mm", 0, "groove density of the grating, lines/mm (1 to 10000)")
	wl := fs.Float64("wavelength-nm", 0, "centre wavelength, nm (100 to 3000)")
	passes := fs.Int("passes", 0, "passes through the grating pair N (1 to 16)")
	lever := fs.Float64("lever", 0, "grating displacement per mm of stage travel k (> 0 to 100)")
	travel := fs.Float64("travel-mm", 0, "stage travel from the zero-dispersion position, mm (-10000 to 10000)")
	inc := fs.Float64("incidence-deg", math.NaN(), "angle of incidence, deg (-89 to 89; default Littrow)")
	order := fs.Int("order", 1, "diffraction order m (1 to 10)")
	asJSON := fs.Bool("json", false, "print JSON")
	if err := Parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return Usagef("%s: unexpected argument %q", fs.Name(), fs.Arg(0))
	}
	if err := calibNeed(fs, "lines-per-mm", "wavelength-nm", "passes", "lever", "travel-mm"); err != nil {
		return err
	}
	for _, chk := range []error{
		calibInRange(fs, "lines-per-mm", *lines, 1, 10000, " lines/mm"),
		calibInRange(fs, "wavelength-nm", *wl, 100, 3000, " nm"),
		calibInRange(fs, "passes", float64(*passes), 1, 16, ""),
		calibInRange(fs, "travel-mm", *travel, -10000, 10000, " mm"),
		calibInRange(fs, "order", float64(*order), 1, 10, ""),
	} {
		if chk != nil {
			return chk
		}
	}
	if math.IsNaN(*lever) || *lever <= 0 || *lever > 100 {
		return Usagef("%s: --lever %g is out of range: allowed > 0 to 100", fs.Name(), *lever)
	}
	littrow := !calibFlagGiven(fs, "incidence-deg")
	if !littrow {
		if err := calibInRange(fs, "incidence-deg", *inc, -89, 89, " deg"); err != nil {
			return err
		}
	}
	s := calib.Stretcher{LinesPerMM: *lines, WavelengthNM: *wl, IncidenceDeg: *inc, Littrow: littrow,
		Order: *order, Passes: *passes, Lever: *lever}
	thd, err := s.DiffractionDeg()
	if err != nil {
		return Usagef("%s: --lines-per-mm %g, --wavelength-nm %g, --order %d: %v (need m·λ·lines/mm ≤ 2 in Littrow)", fs.Name(), *lines, *wl, *order, err)
	}
	k, err := s.SlopePS2PerMM()
	if err != nil {
		return Usagef("%s: %v", fs.Name(), err)
	}
	g := k * *travel
	if *asJSON {
		out := map[string]any{
			"gdd_ps2": g, "slope_ps2_per_mm": k, "travel_mm": *travel, "diffraction_deg": thd,
			"lines_per_mm": *lines, "wavelength_nm": *wl, "passes": *passes, "lever": *lever, "order": *order, "littrow": littrow,
		}
		if !littrow {
			out["incidence_deg"] = *inc
		}
		return calibPrintJSON(env.Stdout, out)
	}
	geom := "Littrow"
	if !littrow {
		geom = fmt.Sprintf("incidence %g°", *inc)
	}
	fmt.Fprintf(env.Stdout, "GDD %.4g ps² for %g mm of travel\nslope %.6g ps²/mm (%g lines/mm, %g nm, %s, diffraction %.3f°, order %d, N = %d, k = %g)\n",
		g, *travel, k, *lines, *wl, geom, thd, *order, *passes, *lever)
	return nil
}

func runCalibEnergy(ctx context.Context, env *Env, args []string) error {
	c := groups["calib"].Commands["energy"]
	fs := NewFlagSet(env, "calib", c)
	nm := fs.Float64("nm", 0, "line spacing Δλ, nm (-100 to 100)")
	mev := fs.Float64("mev", 0, "energy splitting ΔE, meV (-1000 to 1000)")
	at := fs.Float64("at-nm", 0, "wavelength the spacing is measured at, nm (100 to 3000)")
	asJSON := fs.Bool("json", false, "print JSON")
	if err := Parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return Usagef("%s: unexpected argument %q", fs.Name(), fs.Arg(0))
	}
	hasNM, hasMeV := calibFlagGiven(fs, "nm"), calibFlagGiven(fs, "mev")
	if hasNM == hasMeV {
		return Usagef("%s: give exactly one of --nm and --mev", fs.Name())
	}
	if err := calibNeed(fs, "at-nm"); err != nil {
		return err
	}
	if err := calibInRange(fs, "at-nm", *at, 100, 3000, " nm"); err != nil {
		return err
	}
	var dnm, dmev float64
	if hasNM {
		if err := calibInRange(fs, "nm", *nm, -100, 100, " nm"); err != nil {
			return err
		}
		dnm, dmev = *nm, calib.SplittingMeV(*nm, *at)
	} else {
		if err := calibInRange(fs, "mev", *mev, -1000, 1000, " meV"); err != nil {
			return err
		}
		dmev, dnm = *mev, calib.SplittingNM(*mev, *at)
	}
	if *asJSON {
		return calibPrintJSON(env.Stdout, map[string]any{"nm": dnm, "mev": dmev, "at_nm": *at, "photon_mev": calib.EnergyMeV(*at)})
	}
	if hasNM {
		fmt.Fprintf(env.Stdout, "%g nm at %g nm = %.4f meV (ΔE ≈ hc·Δλ/λ²)\n", dnm, *at, dmev)
	} else {
		fmt.Fprintf(env.Stdout, "%g meV at %g nm = %.4f nm (Δλ ≈ ΔE·λ²/hc)\n", dmev, *at, dnm)
	}
	return nil
}

// maxCalibReadings bounds a readings file.
const maxCalibReadings = 100000

// parseReadingsCSV reads a two-column CSV with the header "colA,colB"
// (whitespace around fields allowed, lines starting with # ignored).
// Errors name the line and the field.
func parseReadingsCSV(r io.Reader, colA, colB string) (a, b []float64, err error) {
	cr := csv.NewReader(r)
	cr.Comment = '#'
	cr.FieldsPerRecord = -1
	cr.TrimLeadingSpace = true
	cr.ReuseRecord = true
	header := true
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, nil, fmt.Errorf("readings: %w", err)
		}
		line, _ := cr.FieldPos(0)
		if len(rec) != 2 {
			return nil, nil, fmt.Errorf("readings: line %d: %d fields, want 2 (%s,%s)", line, len(rec), colA, colB)
		}
		if header {
			if strings.TrimSpace(rec[0]) != colA || strings.TrimSpace(rec[1]) != colB {
				return nil, nil, fmt.Errorf("readings: line %d: header %q,%q, want %s,%s", line, rec[0], rec[1], colA, colB)
			}
			header = false
			continue
		}
		x, err1 := strconv.ParseFloat(strings.TrimSpace(rec[0]), 64)
		y, err2 := strconv.ParseFloat(strings.TrimSpace(rec[1]), 64)
		if err1 != nil || math.IsNaN(x) || math.IsInf(x, 0) {
			return nil, nil, fmt.Errorf("readings: line %d: %s %q is not a finite number", line, colA, rec[0])
		}
		if err2 != nil || math.IsNaN(y) || math.IsInf(y, 0) {
			return nil, nil, fmt.Errorf("readings: line %d: %s %q is not a finite number", line, colB, rec[1])
		}
		if len(a) >= maxCalibReadings {
			return nil, nil, fmt.Errorf("readings: more than %d lines", maxCalibReadings)
		}
		a, b = append(a, x), append(b, y)
	}
	if header {
		return nil, nil, fmt.Errorf("readings: empty, want the header %s,%s and one reading a line", colA, colB)
	}
	return a, b, nil
}

func calibOpenReadings(env *Env, fs *flag.FlagSet, path string) (io.ReadCloser, error) {
	if path == "-" {
		if env.Stdin == nil {
			return nil, Usagef("%s: --readings -: no standard input", fs.Name())
		}
		return io.NopCloser(env.Stdin), nil
	}
	f, err := os.Open(path)
	if err != nil {
		return nil, Usagef("%s: --readings %q: %v", fs.Name(), path, err)
	}
	return f, nil
}

func runCalibAttenuator(ctx context.Context, env *Env, args []string) error {
	c := groups["calib"].Commands["attenuator"]
	fs := NewFlagSet(env, "calib", c)
	path := fs.String("readings", "", "CSV file with the header angle_deg,power_uw (- for standard input)")
	law := fs.String("law", "malus", "malus (half-wave plate before a polariser) or nd (graded ND wheel)")
	asJSON := fs.Bool("json", false, "print JSON")
	if err := Parse(fs, args); err != nil {
		return err
	}
	if err := calibNeed(fs, "readings"); err != nil {
		return err
	}
	if *law != "malus" && *law != "nd" {
		return Usagef("%s: --law %q: allowed malus or nd", fs.Name(), *law)
	}
	rc, err := calibOpenReadings(env, fs, *path)
	if err != nil {
		return err
	}
	defer rc.Close()
	ang, pw, err := parseReadingsCSV(rc, "angle_deg", "power_uw")
	if err != nil {
		return Usagef("%s: --readings %s: %v", fs.Name(), *path, err)
	}
	if *law == "malus" {
		f, err := calib.FitMalus(ang, pw)
		if err != nil {
			return Usagef("%s: %v", fs.Name(), err)
		}
		if *asJSON {
			return calibPrintJSON(env.Stdout, map[string]any{"law": "malus", "fit": f})
		}
		fmt.Fprintf(env.Stdout, "P(θ) = Pmin + (Pmax − Pmin)·cos²(2(θ − θ0))  [%d readings]\n", len(ang))
		fmt.Fprintf(env.Stdout, "  Pmin %.6g ± %.2g µW\n  Pmax %.6g ± %.2g µW\n  θ0   %.5g ± %.2g deg\n", f.PMinUW, f.Sigma.PMinUW, f.PMaxUW, f.Sigma.PMaxUW, f.Theta0Deg, f.Sigma.Theta0Deg)
		fmt.Fprintf(env.Stdout, "residuals: rms %.3g µW, max %.3g µW (dof %d)\n", f.RMS, f.MaxAbs, f.DoF)
		return nil
	}
	f, err := calib.FitNDWheel(ang, pw)
	if err != nil {
		return Usagef("%s: %v", fs.Name(), err)
	}
	if *asJSON {
		return calibPrintJSON(env.Stdout, map[string]any{"law": "nd", "fit": f})
	}
	fmt.Fprintf(env.Stdout, "P(θ) = P0·10^(−k·θ)  [%d readings, %g to %g deg]\n", len(ang), f.MinDeg, f.MaxDeg)
	fmt.Fprintf(env.Stdout, "  P0 %.6g ± %.2g µW\n  k  %.6g ± %.2g OD/deg\n", f.P0UW, f.Sigma.P0UW, f.ODPerDeg, f.Sigma.ODPerDeg)
	fmt.Fprintf(env.Stdout, "residuals: rms %.3g µW, max %.3g µW (dof %d)\n", f.RMS, f.MaxAbs, f.DoF)
	return nil
}

func runCalibStretcherFit(ctx context.Context, env *Env, args []string) error {
	c := groups["calib"].Commands["stretcher-fit"]
	fs := NewFlagSet(env, "calib", c)
	path := fs.String("readings", "", "CSV file with the header stage_mm,fwhm_ps (- for standard input)")
	asJSON := fs.Bool("json", false, "print JSON")
	if err := Parse(fs, args); err != nil {
		return err
	}
	if err := calibNeed(fs, "readings"); err != nil {
		return err
	}
	rc, err := calibOpenReadings(env, fs, *path)
	if err != nil {
		return err
	}
	defer rc.Close()
	x, y, err := parseReadingsCSV(rc, "stage_mm", "fwhm_ps")
	if err != nil {
		return Usagef("%s: --readings %s: %v", fs.Name(), *path, err)
	}
	f, err := calib.FitStretcher(x, y)
	if err != nil {
		return Usagef("%s: %v", fs.Name(), err)
	}
	if *asJSON {
		return calibPrintJSON(env.Stdout, f)
	}
	fmt.Fprintf(env.Stdout, "|GDD| = k·|x − x0|, FWHM = 2√ln2·sqrt(τ0² + GDD²/τ0²)  [%d readings]\n", len(x))
	fmt.Fprintf(env.Stdout, "  k        %.6g ± %.2g ps²/mm (sign not given by durations)\n  x0       %.6g ± %.2g mm\n  TL FWHM  %.5g ± %.2g ps\n",
		f.SlopePS2PerMM, f.SigmaSlopePS2PerMM, f.ZeroMM, f.SigmaZeroMM, f.TLFWHMPS, f.SigmaTLFWHMPS)
	fmt.Fprintf(env.Stdout, "residuals: rms %.3g ps, max %.3g ps (dof %d)\n", f.RMS, f.MaxAbs, f.DoF)
	return nil
}

// The calibration commands below talk to glissd's CalibrationService: the
// bench's calibration versions and the procedures that make new ones.
func init() {
	register("calib", calibSummary, &Command{
		Name: "show", Summary: "show the daemon bench's calibration set in use (or one version)",
		Usage:   "[--version N] [--json]",
		Example: "gliss calib show\ngliss calib show --version 0 --json",
		Run:     runCalibShow,
	})
	register("calib", calibSummary, &Command{
		Name: "list", Summary: "list the daemon bench's calibration versions, newest first",
		Usage:   "[--json]",
		Example: "gliss calib list",
		Run:     runCalibList,
	})
	register("calib", calibSummary, &Command{
		Name: "put", Summary: "store a new calibration version from JSON parts (stretcher, attenuator, pulse_area)",
		Usage:   "--set FILE|- [--note TEXT]",
		Example: "echo '{\"pulse_area\":{\"area_pi_per_sqrt_uw\":0.98}}' | gliss calib put --set - --note \"from the Rabi scan of Tuesday\"",
		Run:     runCalibPut,
	})
	register("calib", calibSummary, &Command{
		Name: "attenuator-run", Summary: "sweep the attenuator, read the power meter, fit the law and store it (refused while a scan runs)",
		Usage:   "[--from-deg A] [--to-deg B] [--count N] [--law malus|nd] [--settle-ms T] [--note TEXT] [--dry-run] [--json]",
		Example: "gliss calib attenuator-run --from-deg 0 --to-deg 90 --count 46",
		Run:     runCalibAttenuatorRun,
	})
	register("calib", calibSummary, &Command{
		Name: "pulse-area", Summary: "fit the pulse-area calibration to a stored zero-chirp power sweep and store it",
		Usage:   "--from-scan ID [--channel xx] [--max-area-pi A] [--temperature-k T] [--note TEXT] [--dry-run] [--json]",
		Example: "gliss scan power --power-uw 0.05:40:40 --spacing amplitude --gdd-ps2 0 --watch\ngliss calib pulse-area --from-scan 20261202T014129.417Z-68ed14 --temperature-k 4.2",
		Run:     runCalibPulseArea,
	})
}

func calibClient(ctx context.Context, server string) (glissv1.CalibrationServiceClient, func() error, error) {
	cl, err := dial(ctx, server)
	if err != nil {
		return nil, nil, err
	}
	return glissv1.NewCalibrationServiceClient(cl.Conn()), cl.Close, nil
}

// printCalibRecord prints a record: its header, then the set's JSON.
func printCalibRecord(w io.Writer, rec *glissv1.CalibrationRecord) {
	created := "nominal (bench file or simulated bench)"
	if rec.GetCreatedAt() != nil {
		created = rec.GetCreatedAt().AsTime().Local().Format("2006-01-02 15:04:05")
	}
	fmt.Fprintf(w, "bench     %s\nversion   %d\ncreated   %s\nnote      %s\n%s", rec.GetBench(), rec.GetVersion(), created, rec.GetNote(), rec.GetSetJson())
	if !strings.HasSuffix(rec.GetSetJson(), "\n") {
		fmt.Fprintln(w)
	}
}

func runCalibShow(ctx context.Context, env *Env, args []string) error {
	c := groups["calib"].Commands["show"]
	fs := NewFlagSet(env, "calib", c)
	server := serverFlag(fs, env)
	version := fs.Int("version", -1, "version to show (0: the nominal set; default: the set in use)")
	asJSON := fs.Bool("json", false, "print the record as protobuf JSON")
	if err := Parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return Usagef("%s: unexpected argument %q", fs.Name(), fs.Arg(0))
	}
	req := &glissv1.GetCalibrationRequest{}
	if calibFlagGiven(fs, "version") {
		if *version < 0 || *version > math.MaxUint32 {
			return Usagef("%s: --version %d is out of range: allowed 0 to %d", fs.Name(), *version, uint32(math.MaxUint32))
		}
		v := uint32(*version)
		req.Version = &v
	}
	cs, done, err := calibClient(ctx, *server)
	if err != nil {
		return err
	}
	defer done()
	rec, err := cs.GetCalibration(ctx, req)
	if err != nil {
		return rpcError(err, nil)
	}
	if *asJSON {
		return printProtoJSON(env.Stdout, rec)
	}
	printCalibRecord(env.Stdout, rec)
	return nil
}

func runCalibList(ctx context.Context, env *Env, args []string) error {
	c := groups["calib"].Commands["list"]
	fs := NewFlagSet(env, "calib", c)
	server := serverFlag(fs, env)
	asJSON := fs.Bool("json", false, "print the list as protobuf JSON")
	if err := Parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return Usagef("%s: unexpected argument %q", fs.Name(), fs.Arg(0))
	}
	cs, done, err := calibClient(ctx, *server)
	if err != nil {
		return err
	}
	defer done()
	res, err := cs.ListCalibrations(ctx, &glissv1.ListCalibrationsRequest{})
	if err != nil {
		return rpcError(err, nil)
	}
	if *asJSON {
		return printProtoJSON(env.Stdout, res)
	}
	for _, r := range res.Calibrations {
		mark := " "
		if r.Version == res.CurrentVersion {
			mark = "*"
		}
		created := "nominal"
		if r.GetCreatedAt() != nil {
			created = r.GetCreatedAt().AsTime().Local().Format("2006-01-02 15:04:05")
		}
		fmt.Fprintf(env.Stdout, "%s %4d  %-19s  %s\n", mark, r.Version, created, r.Note)
	}
	return nil
}

func runCalibPut(ctx context.Context, env *Env, args []string) error {
	c := groups["calib"].Commands["put"]
	fs := NewFlagSet(env, "calib", c)
	server := serverFlag(fs, env)
	set := fs.String("set", "", "JSON file with the parts to change (- for stdin); required")
	note := fs.String("note", "", "how the numbers were obtained (≤ 2000 characters)")
	if err := Parse(fs, args); err != nil {
		return err
	}
	if *set == "" {
		return Usagef("%s: --set FILE is required (- for stdin)", fs.Name())
	}
	var r io.Reader = env.Stdin
	if *set != "-" {
		f, err := os.Open(*set)
		if err != nil {
			return Usagef("%s: --set %s: %v", fs.Name(), *set, err)
		}
		defer f.Close()
		r = f
	}
	b, err := io.ReadAll(io.LimitReader(r, 1<<20+1))
	if err != nil {
		return fmt.Errorf("--set %s: %w", *set, err)
	}
	cs, done, err := calibClient(ctx, *server)
	if err != nil {
		return err
	}
	defer done()
	rec, err := cs.PutCalibration(ctx, &glissv1.PutCalibrationRequest{SetJson: string(b), Note: *note})
	if err != nil {
		return rpcError(err, map[string]string{"set_json": "--set", "note": "--note"})
	}
	fmt.Fprintf(env.Stdout, "stored version %d of bench %s\n", rec.Version, rec.Bench)
	return nil
}

func runCalibAttenuatorRun(ctx context.Context, env *Env, args []string) error {
	c := groups["calib"].Commands["attenuator-run"]
	fs := NewFlagSet(env, "calib", c)
	server := serverFlag(fs, env)
	from := fs.Float64("from-deg", 0, "first angle, deg")
	to := fs.Float64("to-deg", 90, "last angle, deg")
	count := fs.Int("count", 46, "number of readings (4 to 1000)")
	law := fs.String("law", "malus", "law to fit: malus (half-wave plate and polariser) or nd (graded ND wheel)")
	settle := fs.Float64("settle-ms", 0, "wait after each move before reading, ms")
	note := fs.String("note", "", "note stored with the new version")
	dry := fs.Bool("dry-run", false, "fit and report only; store nothing")
	asJSON := fs.Bool("json", false, "print the result as protobuf JSON")
	if err := Parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return Usagef("%s: unexpected argument %q", fs.Name(), fs.Arg(0))
	}
	if *count < 4 || *count > 1000 {
		return Usagef("%s: --count %d is out of range: allowed 4 to 1000", fs.Name(), *count)
	}
	req := &glissv1.RunAttenuatorCalibrationRequest{FromDeg: *from, ToDeg: *to, Count: uint32(*count), SettleMs: *settle, Note: *note, DryRun: *dry}
	switch *law {
	case "malus":
		req.Law = glissv1.AttenuatorLaw_ATTENUATOR_LAW_MALUS
	case "nd":
		req.Law = glissv1.AttenuatorLaw_ATTENUATOR_LAW_ND_WHEEL
	default:
		return Usagef("%s: --law %q: want malus or nd", fs.Name(), *law)
	}
	cs, done, err := calibClient(ctx, *server)
	if err != nil {
		return err
	}
	defer done()
	res, err := cs.RunAttenuatorCalibration(ctx, req)
	if err != nil {
		return rpcError(err, map[string]string{"from_deg": "--from-deg", "to_deg": "--to-deg", "count": "--count", "settle_ms": "--settle-ms", "law": "--law", "note": "--note"})
	}
	if *asJSON {
		return printProtoJSON(env.Stdout, res)
	}
	w := env.Stdout
	fmt.Fprintf(w, "%d readings %g–%g°: rms residual %.4g µW, max %.4g µW\n", len(res.AnglesDeg), *from, *to, res.RmsResidualUw, res.MaxResidualUw)
	fmt.Fprintf(w, "fit  %s\n", res.FitJson)
	if *dry {
		fmt.Fprintln(w, "dry run: nothing stored")
	} else {
		fmt.Fprintf(w, "stored version %d of bench %s\n", res.GetCalibration().GetVersion(), res.GetCalibration().GetBench())
	}
	return nil
}

func runCalibPulseArea(ctx context.Context, env *Env, args []string) error {
	c := groups["calib"].Commands["pulse-area"]
	fs := NewFlagSet(env, "calib", c)
	server := serverFlag(fs, env)
	scan := fs.String("from-scan", "", "id of a stored power sweep at zero chirp; required")
	channel := fs.String("channel", "xx", "counter channel of the biexciton line")
	maxArea := fs.Float64("max-area-pi", 10, "largest pulse area the fit considers, π (1 to 40)")
	mf := addModelFlags(fs)
	note := fs.String("note", "", "note stored with the new version")
	dry := fs.Bool("dry-run", false, "fit and report only; store nothing")
	asJSON := fs.Bool("json", false, "print the result as protobuf JSON")
	if err := Parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return Usagef("%s: unexpected argument %q", fs.Name(), fs.Arg(0))
	}
	if *scan == "" {
		return Usagef("%s: --from-scan ID is required (gliss scan list shows them)", fs.Name())
	}
	if err := calibInRange(fs, "max-area-pi", *maxArea, 1, 40, " π"); err != nil {
		return err
	}
	req := &glissv1.CalibratePulseAreaRequest{ScanId: *scan, Channel: *channel, MaxAreaPi: *maxArea, Note: *note, DryRun: *dry, Phonons: mf.phonons()}
	dm := mf.model()
	req.BindingMev, req.DetuningMev = dm.BindingMev, dm.DetuningMev
	cs, done, err := calibClient(ctx, *server)
	if err != nil {
		return err
	}
	defer done()
	res, err := cs.CalibratePulseArea(ctx, req)
	if err != nil {
		return rpcError(err, map[string]string{"scan_id": "--from-scan", "channel": "--channel", "max_area_pi": "--max-area-pi", "phonons": "--temperature-k", "fwhm_ps": "--binding-mev/--detuning-mev"})
	}
	if *asJSON {
		return printProtoJSON(env.Stdout, res)
	}
	w := env.Stdout
	fmt.Fprintf(w, "π pulse      %.5g ± %.2g µW\nscale        %.6g ± %.2g π/√µW\nχ²/DoF       %.3g\n", res.PiPowerUw, res.SigmaPiPowerUw, res.AreaPiPerSqrtUw, res.SigmaAreaPiPerSqrtUw, res.RedChiSq)
	if res.RedChiSq > 10 {
		fmt.Fprintln(w, "note         χ²/DoF far above 1: the model's yield curve does not describe these counts (a dot with phonons needs --temperature-k T; a different dot --binding-mev/--detuning-mev); the errors are scaled up accordingly")
	}
	if *dry {
		fmt.Fprintln(w, "dry run: nothing stored")
	} else {
		fmt.Fprintf(w, "stored version %d of bench %s\n", res.GetCalibration().GetVersion(), res.GetCalibration().GetBench())
	}
	return nil
}
