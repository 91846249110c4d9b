package cli

import (
	"context"
	"fmt"
	"io"
	"strings"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/client/plot"
)

func init() {
	register("scan", scanSummary, &Command{
		Name:    "plot",
		Summary: "draw a scan's counts as PNG: a heat map over two axes, a line plot over one",
		Usage:   "ID -o FILE.png [--channel xx|x|all] [--at K] [--width-cm W --height-cm H]",
		Example: "gliss scan plot 20261202T010203.456Z-a1b2c3 -o map.png --channel xx\n" +
			"gliss scan plot 20261202T010203.456Z-a1b2c3 -o rabi.png --channel all   (a power sweep: one line per channel)",
		Run: runScanPlot,
	})
}

// AxisLabel is an axis's label with its unit, for figures.
func AxisLabel(k glissv1.AxisKind) string {
	switch k {
	case glissv1.AxisKind_AXIS_KIND_GDD_PS2:
		return "GDD (ps²)"
	case glissv1.AxisKind_AXIS_KIND_STAGE_MM:
		return "stage (mm)"
	case glissv1.AxisKind_AXIS_KIND_POWER_UW:
		return "power on the sample (µW)"
	case glissv1.AxisKind_AXIS_KIND_ANGLE_DEG:
		return "attenuator angle (°)"
	case glissv1.AxisKind_AXIS_KIND_DETUNING_MEV:
		return "laser detuning (meV)"
	case glissv1.AxisKind_AXIS_KIND_TEMPERATURE_K:
		return "temperature (K)"
	case glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI:
		return "pulse area (π)"
	}
	return client.AxisColumn(k)
}

func runScanPlot(ctx context.Context, env *Env, args []string) error {
	c := groups["scan"].Commands["plot"]
	fs := NewFlagSet(env, "scan", c)
	server := serverFlag(fs, env)
	out := fs.String("o", "", "PNG file to write (required)")
	channel := fs.String("channel", "xx", "counter channel to plot; all: every channel (line plots only)")
	at := fs.Int("at", 0, "for a 3-axis scan: index along the third (fastest) axis of the slice to draw")
	widthCM := fs.Float64("width-cm", 16, "figure width, cm (4 to 100)")
	heightCM := fs.Float64("height-cm", 12, "figure height, cm (3 to 100)")
	if err := Parse(fs, reorder(args)); err != nil {
		return err
	}
	id, err := oneID(fs, "plot")
	if err != nil {
		return err
	}
	if *out == "" {
		return Usagef("gliss scan plot: -o FILE.png is required (e.g. -o map.png)")
	}
	if !(*widthCM >= 4 && *widthCM <= 100) || !(*heightCM >= 3 && *heightCM <= 100) {
		return Usagef("--width-cm %v --height-cm %v: allowed 4 to 100 cm and 3 to 100 cm", *widthCM, *heightCM)
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
	g, err := client.NewGrid(sc, cl.Points(ctx, id, 0))
	if err != nil {
		return fmt.Errorf("gliss scan plot %s: %w", id, err)
	}
	if g.Stored == 0 {
		return fmt.Errorf("gliss scan plot %s: no point stored yet (state %s); try again once the scan runs", id, stateName(sc.State))
	}
	fig, err := ScanFigure(sc, g, *channel, *at)
	if err != nil {
		return err
	}
	fig.Options.WidthCM, fig.Options.HeightCM = *widthCM, *heightCM
	return writeOut(env, *out, func(w io.Writer) (uint64, error) {
		return g.Stored, fig.Write(w)
	})
}

// Figure is a scan's plot, ready to write.
type Figure struct {
	Options plot.Options
	// Heat map (two axes): X, Y and Z (C order over X × Y).
	X, Y, Z []float64
	// Line plot (one axis): X and Series.
	Series []plot.Series
}

// Write writes the figure as PNG.
func (f *Figure) Write(w io.Writer) error {
	if f.Series != nil {
		return plot.Line(w, f.X, f.Series, f.Options)
	}
	return plot.HeatMap(w, f.X, f.Y, f.Z, f.Options)
}

// ScanFigure chooses the figure of a scan: a heat map of one channel over
// the first two axes (the first along x), or for one axis a line plot of
// one channel or all. For three axes it draws the slice at index at of
// the third.
func ScanFigure(sc *glissv1.Scan, g *client.Grid, channel string, at int) (*Figure, error) {
	axes := sc.GetSpec().GetAxes()
	var chans []int
	if channel == "all" {
		for i := range g.Channels {
			chans = append(chans, i)
		}
	} else if i := g.Channel(channel); i >= 0 {
		chans = []int{i}
	} else if channel == "xx" && len(g.Channels) > 0 {
		chans = []int{len(g.Channels) - 1} // a bench without an "xx" line: its last channel
	}
	if len(chans) == 0 {
		return nil, Usagef("--channel %q: the scan has channels %s (or all)", channel, strings.Join(g.Channels, ", "))
	}
	name := sc.GetSpec().GetName()
	if name == "" {
		name = sc.GetId()
	}
	gate := fmt.Sprintf("counts per %g ms gate", sc.GetSpec().GetGateMs())
	f := &Figure{X: g.AxisValues[0], Options: plot.Options{XLabel: AxisLabel(axes[0].GetKind())}}
	title := fmt.Sprintf("%s  (%s)", name, stateName(sc.State))
	// Two axes, one of them a single value: a line over the other
	// (the flat index is then the index along that axis).
	if len(axes) == 2 && (g.Shape[0] == 1 || g.Shape[1] == 1) {
		k, one := 0, 1
		if g.Shape[0] == 1 {
			k, one = 1, 0
		}
		f.X = g.AxisValues[k]
		f.Options.XLabel = AxisLabel(axes[k].GetKind())
		title += fmt.Sprintf(", %s = %g", client.AxisColumn(axes[one].GetKind()), g.AxisValues[one][0])
		axes = axes[k : k+1]
	}
	if len(axes) == 1 {
		f.Options.Title = title
		f.Options.YLabel = gate
		for _, ci := range chans {
			f.Series = append(f.Series, plot.Series{Name: g.Channels[ci], Y: g.Counts[ci]})
		}
		return f, nil
	}
	if len(chans) != 1 {
		return nil, Usagef("--channel all: a heat map shows one channel; give one of %s", strings.Join(g.Channels, ", "))
	}
	ci := chans[0]
	n0, n1 := g.Shape[0], g.Shape[1]
	z := g.Counts[ci]
	title = strings.ToUpper(g.Channels[ci]) + " counts: " + title
	if len(axes) == 3 {
		n2 := g.Shape[2]
		if at < 0 || at >= n2 {
			return nil, Usagef("--at %d: the third axis (%s) has indices 0 to %d", at, client.AxisColumn(axes[2].GetKind()), n2-1)
		}
		z = make([]float64, n0*n1)
		for i := range n0 * n1 {
			z[i] = g.Counts[ci][i*n2+at]
		}
		title += fmt.Sprintf(", %s = %g", client.AxisColumn(axes[2].GetKind()), g.AxisValues[2][at])
	} else if len(axes) > 3 {
		return nil, fmt.Errorf("scan %s has %d axes: plots draw at most three (export --format npy instead)", sc.GetId(), len(axes))
	}
	f.Y, f.Z = g.AxisValues[1], z
	f.Options.Title = title
	f.Options.YLabel = AxisLabel(axes[1].GetKind())
	f.Options.ZLabel = g.Channels[ci] + " " + gate
	return f, nil
}
