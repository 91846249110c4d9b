package plot

import (
	"image"
	"image/color"
	"math"
	"sort"

	gplot "gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// cells draws a heat map's cells as one raster image at the figure's own
// resolution, one image pixel for each output pixel. Its grid's axes are
// ascending (sortedGrid); each cell reaches half-way to its neighbours (the
// outer cells as far out as in), so uneven axes are drawn as they are.
// Drawn as one rectangle a cell, anti-aliased edges leave hairline seams
// of background between neighbouring cells; a raster of whole pixels has
// none.
type cells struct {
	g      grid
	colors []color.Color // the palette, lowest value first
	lo, hi float64       // the values of the first and last colour
	nan    color.Color   // cells without a finite value
	dpi    float64       // output pixels per inch
}

// sortedGrid is the grid of z over xs × ys with both axes in ascending
// order (axes may be given descending or as a list out of order), so that
// every cell lies between its neighbours in value.
func sortedGrid(xs, ys, z []float64) grid {
	px, py := order(xs), order(ys)
	if px == nil && py == nil {
		return grid{xs: xs, ys: ys, z: z}
	}
	if px == nil {
		px = identity(len(xs))
	}
	if py == nil {
		py = identity(len(ys))
	}
	g := grid{xs: make([]float64, len(xs)), ys: make([]float64, len(ys)), z: make([]float64, len(z))}
	for i, pi := range px {
		g.xs[i] = xs[pi]
		for j, pj := range py {
			g.z[i*len(ys)+j] = z[pi*len(ys)+pj]
		}
	}
	for j, pj := range py {
		g.ys[j] = ys[pj]
	}
	return g
}

// order is the ascending permutation of v, or nil when v is already
// ascending.
func order(v []float64) []int {
	up := true
	for i := 1; i < len(v); i++ {
		up = up && v[i] >= v[i-1]
	}
	if up {
		return nil
	}
	p := identity(len(v))
	sort.SliceStable(p, func(a, b int) bool { return v[p[a]] < v[p[b]] })
	return p
}

func identity(n int) []int {
	p := make([]int, n)
	for i := range p {
		p[i] = i
	}
	return p
}

// edges returns the n+1 cell edges of the axis values v: half-way between
// neighbours, and half a neighbour's spacing beyond the outer values (±0.5
// for a single value).
func edges(v []float64) []float64 {
	n := len(v)
	e := make([]float64, n+1)
	if n == 1 {
		e[0], e[1] = v[0]-0.5, v[0]+0.5
		return e
	}
	e[0] = v[0] - (v[1]-v[0])/2
	for i := 1; i < n; i++ {
		e[i] = (v[i-1] + v[i]) / 2
	}
	e[n] = v[n-1] + (v[n-1]-v[n-2])/2
	return e
}

// DataRange implements plot.DataRanger: the outer cell edges.
func (c cells) DataRange() (xmin, xmax, ymin, ymax float64) {
	ex, ey := edges(c.g.xs), edges(c.g.ys)
	return ex[0], ex[len(ex)-1], ey[0], ey[len(ey)-1]
}

// color is the colour of a value, as gonum's heat map picks it: the
// nearest of the palette's evenly spaced colours.
func (c cells) color(v float64) color.Color {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return c.nan
	}
	n := len(c.colors)
	k := int(math.Round((v - c.lo) / (c.hi - c.lo) * float64(n-1)))
	return c.colors[min(max(k, 0), n-1)]
}

// span maps the ascending cell edges of one axis to canvas coordinates
// and finds, for each of npx pixel centres from lo to hi, the cell it
// falls in (-1: none).
func span(e []float64, tr func(float64) vg.Length, lo, hi vg.Length, npx int) []int {
	at := make([]vg.Length, len(e))
	for i, v := range e {
		at[i] = tr(v)
	}
	n := len(e) - 1
	out := make([]int, npx)
	step := (hi - lo) / vg.Length(npx)
	for p := range npx {
		x := lo + (vg.Length(p)+0.5)*step
		k := sort.Search(len(at), func(i int) bool { return at[i] > x }) - 1 // cell k: edges k, k+1
		if k < 0 || k >= n {
			k = -1
		}
		out[p] = k
	}
	return out
}

// Plot implements plot.Plotter.
func (c cells) Plot(dc draw.Canvas, p *gplot.Plot) {
	trX, trY := p.Transforms(&dc)
	r := dc.Rectangle
	px := func(l vg.Length) int { return max(1, int(math.Round(l.Dots(c.dpi)))) }
	w, h := px(r.Max.X-r.Min.X), px(r.Max.Y-r.Min.Y)
	cols := span(edges(c.g.xs), trX, r.Min.X, r.Max.X, w)
	rows := span(edges(c.g.ys), trY, r.Min.Y, r.Max.Y, h)
	img := image.NewNRGBA(image.Rect(0, 0, w, h))
	ny := len(c.g.ys)
	for j, row := range rows {
		if row < 0 {
			continue
		}
		y := h - 1 - j // image rows run down, canvas y up
		for i, col := range cols {
			if col < 0 {
				continue
			}
			img.Set(i, y, c.color(c.g.z[col*ny+row]))
		}
	}
	dc.DrawImage(r, img)
}
