// Package plot draws gliss's figures as PNG: a heat map of counts over two
// axes with a colour scale, and a line plot over one axis, both in physical
// units. It draws with gonum.org/v1/plot; the colour map is gliss's own
// (see Dusk).
//
// For a power × chirp map held as a flat slice z in C order (z[i*len(ys)+j]
// is the value at xs[i], ys[j]):
//
//	err := plot.HeatMap(f, gddPS2, powerUW, countsXX, plot.Options{
//		Title: "XX counts", XLabel: "GDD (ps²)", YLabel: "power (µW)", ZLabel: "XX counts per gate",
//	})
package plot

import (
	"errors"
	"fmt"
	"image/color"
	"io"
	"math"
	"strconv"

	gplot "gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
)

// Options are the texts and size of a figure.
type Options struct {
	Title  string
	XLabel string // with the unit, e.g. "GDD (ps²)"
	YLabel string
	ZLabel string // the colour scale's label (heat map) or the y label's fallback
	// WidthCM and HeightCM are the figure size (default 16 × 12 cm);
	// DPI the resolution (default 150).
	WidthCM, HeightCM float64
	DPI               float64
}

func (o Options) size() (vg.Length, vg.Length, float64) {
	w, h, dpi := o.WidthCM, o.HeightCM, o.DPI
	if w <= 0 {
		w = 16
	}
	if h <= 0 {
		h = 12
	}
	if dpi <= 0 {
		dpi = 150
	}
	return vg.Length(w) * vg.Centimeter, vg.Length(h) * vg.Centimeter, dpi
}

// NaNColor fills heat map cells without a value (points not stored).
var NaNColor = color.NRGBA{R: 0xd8, G: 0xd8, B: 0xd8, A: 0xff}

// grid adapts a flat C-order slice to gonum's GridXYZ (columns along x).
type grid struct {
	xs, ys, z []float64
}

func (g grid) Dims() (int, int)   { return len(g.xs), len(g.ys) }
func (g grid) Z(c, r int) float64 { return g.z[c*len(g.ys)+r] }
func (g grid) X(c int) float64    { return g.xs[c] }
func (g grid) Y(r int) float64    { return g.ys[r] }
func (g grid) minMax() (lo, hi float64, ok bool) {
	lo, hi = math.Inf(1), math.Inf(-1)
	for _, v := range g.z {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			continue
		}
		lo, hi, ok = math.Min(lo, v), math.Max(hi, v), true
	}
	return lo, hi, ok
}

func checkAxis(name string, v []float64) error {
	if len(v) == 0 {
		return fmt.Errorf("plot: %s axis has no values", name)
	}
	for i, x := range v {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return fmt.Errorf("plot: %s[%d] = %v is not a finite number", name, i, x)
		}
	}
	return nil
}

// HeatMap writes a PNG heat map of z over xs × ys with a colour scale on
// the right. z is flat in C order: z[i*len(ys)+j] is the value at xs[i],
// ys[j]; NaN cells (points not stored) are grey. Axes may be unevenly
// spaced (e.g. power spaced in amplitude) or descending: each cell reaches
// half-way to its neighbours. The cells are one raster at the figure's
// resolution (cells.go), so neighbours meet without seams.
func HeatMap(w io.Writer, xs, ys, z []float64, o Options) error {
	if err := checkAxis("x", xs); err != nil {
		return err
	}
	if err := checkAxis("y", ys); err != nil {
		return err
	}
	if len(z) != len(xs)*len(ys) {
		return fmt.Errorf("plot: %d values for a %d × %d grid (want %d)", len(z), len(xs), len(ys), len(xs)*len(ys))
	}
	g := sortedGrid(xs, ys, z)
	lo, hi, ok := g.minMax()
	if !ok {
		return errors.New("plot: no finite value to plot (no point stored yet?)")
	}
	if hi == lo {
		hi = lo + 1
	}
	cm := Dusk()
	cm.SetMin(lo)
	cm.SetMax(hi)
	width, height, dpi := o.size()

	p := gplot.New()
	p.Title.Text = o.Title
	p.X.Label.Text = o.XLabel
	p.Y.Label.Text = o.YLabel
	p.X.Padding, p.Y.Padding = 0, 0
	p.X.Tick.Marker, p.Y.Tick.Marker = niceTicks{}, niceTicks{}
	p.Add(cells{g: g, colors: cm.Palette(256).Colors(), lo: lo, hi: hi, nan: NaNColor, dpi: float64(int(dpi))}) // vgimg takes whole dots per inch

	bar := gplot.New()
	cb := &plotter.ColorBar{ColorMap: cm, Vertical: true}
	bar.Add(cb)
	bar.HideX()
	bar.Y.Padding = 0
	bar.Y.Label.Text = o.ZLabel
	bar.Y.Tick.Marker = niceTicks{}

	img := vgimg.NewWith(vgimg.UseWH(width, height), vgimg.UseDPI(int(dpi)), vgimg.UseBackgroundColor(color.White))
	dc := margins(draw.New(img))
	// The colour bar sits at the right edge, its coloured strip barData
	// wide and as tall as the map's data area; its axis (label, tick labels,
	// ticks) takes what it needs to the strip's left, and the map the rest.
	// (A canvas narrower than the axis would make gonum draw the strip over
	// its own ticks.)
	barData := 0.45 * vg.Centimeter
	side := draw.Crop(dc, dc.Max.X-dc.Min.X-2*vg.Centimeter, -0.35*vg.Centimeter, 0, 0)
	bd := bar.DataCanvas(side)
	side.Min.X += (bd.Max.X - bd.Min.X) - barData
	if lim := dc.Min.X + (dc.Max.X-dc.Min.X)*2/3; side.Min.X < lim {
		side.Min.X = lim // an axis wider than a third of the figure: squeeze it
	}
	main := draw.Crop(dc, 0, side.Min.X-dc.Max.X-0.2*vg.Centimeter, 0, 0)
	md := p.DataCanvas(main)
	bd = bar.DataCanvas(side)
	side.Min.Y += md.Min.Y - bd.Min.Y
	side.Max.Y -= bd.Max.Y - md.Max.Y
	p.Draw(main)
	bar.Draw(side)
	_, err := vgimg.PngCanvas{Canvas: img}.WriteTo(w)
	return err
}

// margins keeps labels at the edges inside the image.
func margins(c draw.Canvas) draw.Canvas {
	return draw.Crop(c, 0.1*vg.Centimeter, -0.45*vg.Centimeter, 0.1*vg.Centimeter, -0.25*vg.Centimeter)
}

// Series is one line of a line plot.
type Series struct {
	Name string // legend entry ("xx"); no legend when there is one unnamed series
	Y    []float64
}

// lineColors are the series colours, distinct in hue and lightness.
var lineColors = []color.Color{
	color.NRGBA{R: 0x1f, G: 0x4e, B: 0x9a, A: 0xff},
	color.NRGBA{R: 0xc4, G: 0x4e, B: 0x1c, A: 0xff},
	color.NRGBA{R: 0x2e, G: 0x8b, B: 0x57, A: 0xff},
	color.NRGBA{R: 0x7b, G: 0x3f, B: 0x9e, A: 0xff},
}

// Line writes a PNG line plot (with point markers) of each series over
// xs. NaN values (points not stored) leave gaps.
func Line(w io.Writer, xs []float64, series []Series, o Options) error {
	if err := checkAxis("x", xs); err != nil {
		return err
	}
	if len(series) == 0 {
		return errors.New("plot: no series to plot")
	}
	p := gplot.New()
	p.Title.Text = o.Title
	p.X.Label.Text = o.XLabel
	p.Y.Label.Text = o.YLabel
	if p.Y.Label.Text == "" {
		p.Y.Label.Text = o.ZLabel
	}
	p.X.Tick.Marker, p.Y.Tick.Marker = niceTicks{}, niceTicks{}
	p.Add(plotter.NewGrid())
	any := false
	for k, s := range series {
		if len(s.Y) != len(xs) {
			return fmt.Errorf("plot: series %q has %d values for %d x values", s.Name, len(s.Y), len(xs))
		}
		col := lineColors[k%len(lineColors)]
		// Split at NaN so that missing points are gaps, not zeros.
		var seg plotter.XYs
		flush := func(first bool) error {
			if len(seg) == 0 {
				return nil
			}
			l, sc, err := plotter.NewLinePoints(seg)
			if err != nil {
				return err
			}
			l.Color, sc.Color = col, col
			l.Width = vg.Points(1.5)
			sc.Shape = draw.CircleGlyph{}
			sc.Radius = vg.Points(2)
			p.Add(l, sc)
			if first && s.Name != "" && (len(series) > 1 || s.Name != "") {
				p.Legend.Add(s.Name, l, sc)
			}
			seg = nil
			return nil
		}
		first := true
		for i, y := range s.Y {
			if math.IsNaN(y) || math.IsInf(y, 0) {
				if len(seg) > 0 {
					if err := flush(first); err != nil {
						return err
					}
					first = false
				}
				continue
			}
			seg = append(seg, plotter.XY{X: xs[i], Y: y})
			any = true
		}
		if err := flush(first); err != nil {
			return err
		}
	}
	if !any {
		return errors.New("plot: no finite value to plot (no point stored yet?)")
	}
	p.Legend.Top = true
	p.Legend.XOffs = -0.6 * vg.Centimeter
	p.Legend.YOffs = -0.2 * vg.Centimeter
	width, height, dpi := o.size()
	img := vgimg.NewWith(vgimg.UseWH(width, height), vgimg.UseDPI(int(dpi)), vgimg.UseBackgroundColor(color.White))
	p.Draw(margins(draw.New(img)))
	_, err := vgimg.PngCanvas{Canvas: img}.WriteTo(w)
	return err
}

// niceTicks labels about six round values (1, 2 or 5 × 10^k apart) with
// four minor ticks between labels, formatted without trailing zeros.
type niceTicks struct{}

// Ticks implements plot.Ticker.
func (niceTicks) Ticks(lo, hi float64) []gplot.Tick {
	if !(hi > lo) || math.IsInf(hi-lo, 0) {
		return []gplot.Tick{{Value: lo, Label: strconv.FormatFloat(lo, 'g', 4, 64)}}
	}
	raw := (hi - lo) / 6
	mag := math.Pow(10, math.Floor(math.Log10(raw)))
	step := mag
	for _, f := range []float64{1, 2, 5, 10} {
		if f*mag >= raw {
			step = f * mag
			break
		}
	}
	minor := step / 5
	var out []gplot.Tick
	for k := math.Ceil(lo / minor); k*minor <= hi*(1+1e-12)+1e-300; k++ {
		v := k * minor
		if math.Abs(v) < minor*1e-9 {
			v = 0
		}
		t := gplot.Tick{Value: v}
		if r := math.Mod(math.Abs(k), 5); r < 1e-9 || 5-r < 1e-9 {
			t.Label = strconv.FormatFloat(v, 'g', 6, 64)
		}
		out = append(out, t)
	}
	return out
}
