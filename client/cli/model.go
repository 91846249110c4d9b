package cli

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
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

	"github.com/gliss-lab/gliss/client/plot"
	"github.com/gliss-lab/gliss/sim/model"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// The model commands run the dot model of sim/model in this process: no
// daemon, no instruments.

const modelGroupSummary = "the dot model: one point or a map, no instruments"

// maxMapPoints bounds a map from the command line.
const maxMapPoints = 4_000_000

func init() {
	register("model", modelGroupSummary, &Command{
		Name:    "point",
		Summary: "populations and photon yields of the dot for one pulse",
		Usage:   "[--fwhm-ps F] [--gdd-ps2 G] [--area-pi A] [--binding-mev B] [--detuning-mev D] [--x-lifetime-ps TX] [--xx-lifetime-ps TXX] [--tolerance T] [--json]",
		Example: "gliss model point --gdd-ps2 20 --area-pi 8 --x-lifetime-ps 270 --xx-lifetime-ps 130 --json",
		Run:     runModelPoint,
	})
	register("model", modelGroupSummary, &Command{
		Name:    "map",
		Summary: "a power × chirp or detuning × chirp map of the dot as CSV",
		Usage:   "--gdd-ps2 FROM:TO:N (--area-pi FROM:TO:N | --detuning-mev FROM:TO:N) [physics flags] [-o map.csv]",
		Example: "gliss model map --gdd-ps2 -25:25:101 --area-pi 0:10:101 --x-lifetime-ps 270 --xx-lifetime-ps 130 -o map.csv\n" +
			"gliss model map --gdd-ps2 -25:25:51 --detuning-mev -1:1:41 --area-pi 8 -o detuning.csv",
		Run: runModelMap,
	})
}

// boundedFloat is a float flag that rejects values outside [lo, hi] (and NaN,
// Inf) with a message naming the allowed range.
type boundedFloat struct {
	v      *float64
	lo, hi float64
	rng    string
}

func (b *boundedFloat) String() string {
	if b == nil || b.v == nil {
		return ""
	}
	return strconv.FormatFloat(*b.v, 'g', -1, 64)
}

func (b *boundedFloat) Set(s string) error {
	v, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) || v < b.lo || v > b.hi {
		return fmt.Errorf("allowed %s", b.rng)
	}
	*b.v = v
	return nil
}

// physicsFlags are the flags of one point; the defaults are the demo dot of
// PHYSICS.md, except the lifetimes: absent means no decay.
type physicsFlags struct {
	p model.Params
	// Phonons (PHYSICS.md §7): only with --temperature-k.
	temperatureK float64
	withPhonons  bool
	bath         phonon.Bath
}

// phononBath is the bath of the flags, or nil without --temperature-k.
func (pf *physicsFlags) phononBath() *phonon.Bath {
	if !pf.withPhonons {
		return nil
	}
	b := pf.bath
	b.TemperatureK = pf.temperatureK
	return &b
}

// setFlag records that a flag was given.
type setFlag struct {
	boundedFloat
	set *bool
}

// String is empty until the flag is set: absent means "no phonons", not 0 K.
func (f *setFlag) String() string {
	if f == nil || f.set == nil || !*f.set {
		return ""
	}
	return f.boundedFloat.String()
}

func (f *setFlag) Set(s string) error {
	if err := f.boundedFloat.Set(s); err != nil {
		return err
	}
	*f.set = true
	return nil
}

var (
	rngFWHM     = fmt.Sprintf("%g to %g ps", model.MinFWHMPS, model.MaxFWHMPS)
	rngGDD      = fmt.Sprintf("-%g to %g ps²", model.MaxAbsGDDPS2, model.MaxAbsGDDPS2)
	rngArea     = fmt.Sprintf("0 to %g", model.MaxAreaPi)
	rngMeV      = fmt.Sprintf("-%g to %g meV", model.MaxAbsMeV, model.MaxAbsMeV)
	rngLifetime = fmt.Sprintf("0 (no decay) or %g to %g ps", model.MinLifetimePS, model.MaxLifetimePS)
	rngTol      = fmt.Sprintf("0 (default %g) or %g to %g", model.DefaultTolerance, model.MinTolerance, model.MaxTolerance)
)

// addPhysics registers the physics flags. With ranges, --gdd-ps2, --area-pi
// and --detuning-mev are left to the caller (they take FROM:TO:N).
func addPhysics(fs *flag.FlagSet, withAxes bool) *physicsFlags {
	pf := &physicsFlags{p: model.DemoParams()}
	pf.p.XLifetimePS, pf.p.XXLifetimePS = 0, 0
	demo := model.DemoParams()
	fs.Var(&boundedFloat{&pf.p.FWHMPS, model.MinFWHMPS, model.MaxFWHMPS, rngFWHM}, "fwhm-ps", "transform-limited intensity FWHM of the pulse, `ps` (allowed "+rngFWHM+")")
	if !withAxes {
		fs.Var(&boundedFloat{&pf.p.GDDPS2, -model.MaxAbsGDDPS2, model.MaxAbsGDDPS2, rngGDD}, "gdd-ps2", "group-delay dispersion, `ps²`, positive = up-chirp (allowed "+rngGDD+")")
		fs.Var(&boundedFloat{&pf.p.AreaPi, 0, model.MaxAreaPi, rngArea}, "area-pi", "pulse area of the TL pulse of the same energy, in units of `π` (allowed "+rngArea+")")
		fs.Var(&boundedFloat{&pf.p.DetuningMeV, -model.MaxAbsMeV, model.MaxAbsMeV, rngMeV}, "detuning-mev", "laser detuning per photon from the two-photon resonance, `meV` (allowed "+rngMeV+")")
	}
	fs.Var(&boundedFloat{&pf.p.BindingMeV, -model.MaxAbsMeV, model.MaxAbsMeV, rngMeV}, "binding-mev", "biexciton binding energy, `meV` (allowed "+rngMeV+")")
	fs.Var(&boundedFloat{&pf.p.XLifetimePS, 0, model.MaxLifetimePS, rngLifetime}, "x-lifetime-ps",
		fmt.Sprintf("exciton lifetime, `ps`; 0 or absent: no decay; the demo dot has %g (allowed %s)", demo.XLifetimePS, rngLifetime))
	fs.Var(&boundedFloat{&pf.p.XXLifetimePS, 0, model.MaxLifetimePS, rngLifetime}, "xx-lifetime-ps",
		fmt.Sprintf("biexciton lifetime, `ps`; 0 or absent: no decay; the demo dot has %g (allowed %s)", demo.XXLifetimePS, rngLifetime))
	fs.Var(&boundedFloat{&pf.p.Tolerance, 0, model.MaxTolerance, rngTol}, "tolerance", "relative and absolute solver `tolerance` (allowed "+rngTol+")")
	db := phonon.DemoBath()
	pf.bath = db
	rngT := fmt.Sprintf("0 to %g K", phonon.MaxTemperatureK)
	rngA := fmt.Sprintf("0 to %g ps²", phonon.MaxAlphaPS2)
	rngC := fmt.Sprintf("%g to %g meV", phonon.MinCutoffMeV, phonon.MaxCutoffMeV)
	fs.Var(&setFlag{boundedFloat{&pf.temperatureK, 0, phonon.MaxTemperatureK, rngT}, &pf.withPhonons}, "temperature-k",
		fmt.Sprintf("sample temperature, `K`: turns on the LA-phonon bath (weak coupling); absent: no phonons; the demo sample is at %g K (allowed %s)", db.TemperatureK, rngT))
	fs.Var(&boundedFloat{&pf.bath.AlphaPS2, 0, phonon.MaxAlphaPS2, rngA}, "phonon-alpha-ps2", "phonon coupling α of J(ω) = α·ω³·exp(−ω²/ωc²), `ps²` (allowed "+rngA+")")
	fs.Var(&boundedFloat{&pf.bath.CutoffMeV, phonon.MinCutoffMeV, phonon.MaxCutoffMeV, rngC}, "phonon-cutoff-mev", "phonon cutoff ħωc, `meV` (allowed "+rngC+")")
	return pf
}

// checkParams turns a validation error into a usage error naming the flag.
func checkParams(cmd string, p model.Params) error {
	err := p.Validate()
	if err == nil {
		return nil
	}
	var re *model.RangeError
	if !errors.As(err, &re) {
		return Usagef("%s: %v", cmd, err)
	}
	name := map[string]string{
		"FWHMPS": "fwhm-ps", "GDDPS2": "gdd-ps2", "AreaPi": "area-pi", "BindingMeV": "binding-mev",
		"DetuningMeV": "detuning-mev", "XLifetimePS": "x-lifetime-ps", "XXLifetimePS": "xx-lifetime-ps",
		"Tolerance": "tolerance",
	}[re.Field]
	return Usagef("%s: --%s = %g is out of range: allowed %s", cmd, name, re.Value, re.Range)
}

// pointJSON is the JSON of one point.
type pointJSON struct {
	G   float64 `json:"g"`
	X   float64 `json:"x"`
	XX  float64 `json:"xx"`
	NX  float64 `json:"n_x"`
	NXX float64 `json:"n_xx"`
}

func runModelPoint(ctx context.Context, env *Env, args []string) error {
	c := groups["model"].Commands["point"]
	fs := NewFlagSet(env, "model", c)
	pf := addPhysics(fs, false)
	asJSON := fs.Bool("json", false, "print one JSON object with keys g, x, xx, n_x, n_xx")
	if err := parseQuiet(fs, env, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return Usagef("gliss model point: unexpected argument %q (the command takes only flags)", fs.Arg(0))
	}
	if err := checkParams("gliss model point", pf.p); err != nil {
		return err
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	r, err := phonon.Solve(pf.p, pf.phononBath())
	if err != nil {
		return fmt.Errorf("gliss model point: %w", err)
	}
	if *asJSON {
		b, err := json.Marshal(pointJSON{r.G, r.X, r.XX, r.NX, r.NXX})
		if err != nil {
			return err
		}
		_, err = fmt.Fprintf(env.Stdout, "%s\n", b)
		return err
	}
	_, err = fmt.Fprintf(env.Stdout, "populations at +6τ: G %.6f  X %.6f  XX %.6f\nphotons per pulse:  n_x %.6f  n_xx %.6f\n",
		r.G, r.X, r.XX, r.NX, r.NXX)
	return err
}

func runModelMap(ctx context.Context, env *Env, args []string) error {
	const cmd = "gliss model map"
	c := groups["model"].Commands["map"]
	fs := NewFlagSet(env, "model", c)
	pf := addPhysics(fs, true)
	gddS := fs.String("gdd-ps2", "", "GDD axis `FROM:TO:N`, ps² (required; allowed "+rngGDD+")")
	areaS := fs.String("area-pi", "", fmt.Sprintf("pulse-area axis `FROM:TO:N` in units of π, or one value for a detuning map (allowed %s; default %g)", rngArea, model.DemoParams().AreaPi))
	detS := fs.String("detuning-mev", "", fmt.Sprintf("detuning axis `FROM:TO:N` in meV instead of --area-pi, or one value (allowed %s; default %g)", rngMeV, model.DemoParams().DetuningMeV))
	out := fs.String("o", "-", "output CSV `file` (- for standard output)")
	png := fs.String("png", "", "also draw the XX photon yield n_xx as a heat map into this PNG `file`")
	if err := parseQuiet(fs, env, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return Usagef("%s: unexpected argument %q (the command takes only flags)", cmd, fs.Arg(0))
	}
	if *gddS == "" {
		return Usagef("%s: --gdd-ps2 FROM:TO:N is required", cmd)
	}
	axis := func(flagName, s string) ([]float64, error) {
		from, to, n, err := ParseRange(s)
		if err != nil {
			return nil, Usagef("%s: --%s %q: %v", cmd, flagName, s, err)
		}
		return RangeValues(from, to, n), nil
	}
	gdd, err := axis("gdd-ps2", *gddS)
	if err != nil {
		return err
	}
	second, secondName := model.AxisAreaPi, "area_pi"
	var values []float64
	switch {
	case strings.Contains(*areaS, ":") && strings.Contains(*detS, ":"):
		return Usagef("%s: --area-pi %q and --detuning-mev %q are both ranges: give FROM:TO:N to one of them", cmd, *areaS, *detS)
	case strings.Contains(*detS, ":"):
		second, secondName = model.AxisDetuningMeV, "detuning_mev"
		if values, err = axis("detuning-mev", *detS); err != nil {
			return err
		}
		if *areaS != "" {
			v, err := axis("area-pi", *areaS)
			if err != nil {
				return err
			}
			pf.p.AreaPi = v[0]
		}
	default:
		if *areaS == "" {
			return Usagef("%s: give --area-pi FROM:TO:N (power × chirp map) or --detuning-mev FROM:TO:N (detuning × chirp map)", cmd)
		}
		if values, err = axis("area-pi", *areaS); err != nil {
			return err
		}
		if *detS != "" {
			v, err := axis("detuning-mev", *detS)
			if err != nil {
				return err
			}
			pf.p.DetuningMeV = v[0]
		}
	}
	if total := len(gdd) * len(values); total > maxMapPoints {
		return Usagef("%s: %d × %d = %d points: allowed at most %d", cmd, len(gdd), len(values), total, maxMapPoints)
	}
	// validate every corner of the grid, naming the flag
	for _, g := range []float64{gdd[0], gdd[len(gdd)-1]} {
		for _, v := range []float64{values[0], values[len(values)-1]} {
			p := pf.p
			p.GDDPS2 = g
			if second == model.AxisAreaPi {
				p.AreaPi = v
			} else {
				p.DetuningMeV = v
			}
			if err := checkParams(cmd, p); err != nil {
				return err
			}
		}
	}

	start := time.Now()
	lastShown := time.Time{}
	shown := false
	progress := func(done, total int) {
		now := time.Now()
		if now.Sub(start) < time.Second || (now.Sub(lastShown) < time.Second && done < total) {
			return
		}
		lastShown, shown = now, true
		fmt.Fprintf(env.Stderr, "%s: %d of %d points (%.0f%%), %.1f s\n", cmd, done, total, 100*float64(done)/float64(total), now.Sub(start).Seconds())
	}
	pts, err := phonon.Map(ctx, pf.p, pf.phononBath(), gdd, second, values, progress)
	if err != nil {
		return fmt.Errorf("%s: %w", cmd, err)
	}
	if shown {
		fmt.Fprintf(env.Stderr, "%s: %d points in %.1f s\n", cmd, len(pts), time.Since(start).Seconds())
	}
	write := func(w io.Writer) error {
		bw := bufio.NewWriter(w)
		fmt.Fprintf(bw, "gdd_ps2,%s,g,x,xx,n_x,n_xx\n", secondName)
		buf := make([]byte, 0, 160)
		for _, mp := range pts {
			v := mp.AreaPi
			if second == model.AxisDetuningMeV {
				v = mp.DetuningMeV
			}
			buf = buf[:0]
			for i, x := range []float64{mp.GDDPS2, v, mp.G, mp.X, mp.XX, mp.NX, mp.NXX} {
				if i > 0 {
					buf = append(buf, ',')
				}
				buf = strconv.AppendFloat(buf, x, 'g', -1, 64)
			}
			buf = append(buf, '\n')
			if _, err := bw.Write(buf); err != nil {
				return err
			}
		}
		return bw.Flush()
	}
	if *png != "" {
		z := make([]float64, len(pts))
		for i, mp := range pts {
			z[i] = mp.NXX
		}
		ylabel := "pulse area (π)"
		if second == model.AxisDetuningMeV {
			ylabel = "detuning (meV)"
		}
		title := "model: XX photons per pulse"
		if b := pf.phononBath(); b != nil {
			title += fmt.Sprintf(", %g K", b.TemperatureK)
		}
		err := writeFileAtomic(*png, func(w io.Writer) error {
			return plot.HeatMap(w, gdd, values, z, plot.Options{Title: title, XLabel: "GDD (ps²)", YLabel: ylabel, ZLabel: "n_xx"})
		})
		if err != nil {
			return fmt.Errorf("%s: --png %s: %w", cmd, *png, err)
		}
	}
	if *out == "-" {
		return write(env.Stdout)
	}
	return writeFileAtomic(*out, write)
}

// parseQuiet is Parse that prints the usage only for --help: a bad flag
// gives the one-line error alone (exit status 2).
func parseQuiet(fs *flag.FlagSet, env *Env, args []string) error {
	var buf bytes.Buffer
	fs.SetOutput(&buf)
	err := Parse(fs, args)
	fs.SetOutput(env.Stderr)
	if errors.Is(err, flag.ErrHelp) {
		_, werr := env.Stderr.Write(buf.Bytes())
		if werr != nil {
			return werr
		}
	}
	return err
}

// writeFileAtomic writes through a temporary file in the same directory and
// renames it over path, so a failed or interrupted run leaves no partial CSV.
func writeFileAtomic(path string, write func(io.Writer) error) error {
	f, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".*")
	if err != nil {
		return fmt.Errorf("gliss model map: write %s: %w", path, err)
	}
	tmp := f.Name()
	if err := write(f); err != nil {
		f.Close()
		os.Remove(tmp)
		return fmt.Errorf("gliss model map: write %s: %w", path, err)
	}
	if err := f.Close(); err != nil {
		os.Remove(tmp)
		return fmt.Errorf("gliss model map: write %s: %w", path, err)
	}
	if err := os.Rename(tmp, path); err != nil {
		os.Remove(tmp)
		return fmt.Errorf("gliss model map: write %s: %w", path, err)
	}
	return nil
}
