package plot

import (
	"bytes"
	"image"
	"image/color"
	"math"
	"os"
	"path/filepath"
	"testing"
)

func nrgba(img image.Image, x, y int) color.NRGBA {
	return color.NRGBAModel.Convert(img.At(x, y)).(color.NRGBA)
}

func near(a, b color.NRGBA, tol int) bool {
	d := func(u, v uint8) int { return int(math.Abs(float64(u) - float64(v))) }
	return d(a.R, b.R) <= tol && d(a.G, b.G) <= tol && d(a.B, b.B) <= tol
}

// box is the bounding box of the pixels of colour c left of xmax.
func box(img image.Image, c color.NRGBA, xmax int) image.Rectangle {
	b := img.Bounds()
	r := image.Rectangle{Min: b.Max, Max: b.Min}
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < min(xmax, b.Max.X); x++ {
			if nrgba(img, x, y) == c {
				r.Min.X, r.Min.Y = min(r.Min.X, x), min(r.Min.Y, y)
				r.Max.X, r.Max.Y = max(r.Max.X, x+1), max(r.Max.Y, y+1)
			}
		}
	}
	return r
}

func render(t *testing.T, name string, xs, ys, z []float64) image.Image {
	t.Helper()
	var b bytes.Buffer
	if err := HeatMap(&b, xs, ys, z, Options{Title: name, XLabel: "GDD (ps²)", YLabel: "power (µW)", ZLabel: "counts per gate"}); err != nil {
		t.Fatal(err)
	}
	if dir := os.Getenv("GLISS_PLOT_DIR"); dir != "" {
		os.WriteFile(filepath.Join(dir, "heat_"+name+".png"), b.Bytes(), 0o644)
	}
	return decode(t, b.Bytes())
}

// Neighbouring cells of one colour meet without a seam of background:
// every pixel inside the map's data area has the cells' colour. (Drawn as
// one anti-aliased rectangle a cell, the map showed light hairlines between
// all cells.)
func TestHeatMapNoSeams(t *testing.T) {
	xs := []float64{-25, -22.5, -20, -10, 0, 2.5, 5, 25}
	ys := []float64{0.05, 0.2, 0.8, 1.8, 3.2, 5, 7.2, 9.8, 12.8, 16.2, 20}
	z := make([]float64, len(xs)*len(ys))
	for i := range z {
		z[i] = 7 // one value: every cell the palette's first colour
	}
	img := render(t, "one_value", xs, ys, z)
	c := Dusk().Palette(256).Colors()[0].(color.NRGBA)
	r := box(img, c, img.Bounds().Max.X*85/100)
	if r.Dx() < 400 || r.Dy() < 400 {
		t.Fatalf("data area %v: too small, layout changed?", r)
	}
	bad := 0
	for y := r.Min.Y; y < r.Max.Y; y++ {
		for x := r.Min.X; x < r.Max.X; x++ {
			if nrgba(img, x, y) != c {
				bad++
			}
		}
	}
	if bad > 0 {
		t.Errorf("%d pixels of %d inside the data area %v are not the cells' colour", bad, r.Dx()*r.Dy(), r)
	}
}

// Cells reach half-way to their neighbours on an unevenly spaced axis:
// along a row of the data area the colour changes at the mid-points.
func TestHeatMapCellEdges(t *testing.T) {
	xs := []float64{0, 1, 4, 9} // cell edges -0.5, 0.5, 2.5, 6.5, 11.5
	ys := []float64{0, 1}
	z := []float64{0, 0, 1, 1, 2, 2, 3, 3}
	img := render(t, "uneven_edges", xs, ys, z)
	pal := Dusk().Palette(256).Colors()
	first := pal[0].(color.NRGBA)
	last := pal[255].(color.NRGBA)
	r0, r3 := box(img, first, img.Bounds().Max.X*85/100), box(img, last, img.Bounds().Max.X*85/100)
	left, right := float64(r0.Min.X), float64(r3.Max.X)
	y := (r0.Min.Y + r0.Max.Y) / 2
	// colour changes along the row; a change over two pixels (the image is
	// resampled to the canvas, and a boundary inside a pixel blends) counts
	// once, at its middle
	var at []float64
	prev := nrgba(img, r0.Min.X, y)
	for x := r0.Min.X + 1; x < r3.Max.X; x++ {
		if c := nrgba(img, x, y); c != prev {
			if n := len(at); n > 0 && float64(x)-at[n-1] <= 1 {
				at[n-1] += 0.5
			} else {
				at = append(at, float64(x))
			}
			prev = c
		}
	}
	if len(at) != 3 {
		t.Fatalf("row %d: %d colour changes at %v, want 3", y, len(at), at)
	}
	for k, e := range []float64{0.5, 2.5, 6.5} {
		want := left + (e+0.5)/12*(right-left)
		if math.Abs(at[k]-want) > 1.5 {
			t.Errorf("edge %v: colour changes at pixel %v, want %.1f (data area %v to %v)", e, at[k], want, left, right)
		}
	}
}

// The colour bar's strip is its own width, with its axis line and ticks
// beside it, not hidden under it.
func TestHeatMapColourBar(t *testing.T) {
	z := make([]float64, 12)
	for i := range z {
		z[i] = float64(i) * 6909 // tops out on a tick value (76000)
	}
	img := render(t, "colour_bar", []float64{-20, 0, 20}, []float64{1, 2, 3, 4}, z)
	b := img.Bounds()
	grey := func(c color.NRGBA) bool { // white, black or a grey of the axes
		return int(c.R)-int(c.G) == 0 && int(c.G)-int(c.B) == 0
	}
	// the strip: along the middle row, the run of colour nearest the right
	// edge; then up its middle column to its top
	y := (b.Min.Y + b.Max.Y) / 2
	x1 := b.Max.X - 1
	for x1 > 0 && grey(nrgba(img, x1, y)) {
		x1--
	}
	x0 := x1
	for x0 > 0 && !grey(nrgba(img, x0-1, y)) {
		x0--
	}
	y0 := y
	for y0 > 0 && !grey(nrgba(img, (x0+x1)/2, y0-1)) {
		y0--
	}
	strip := image.Rect(x0, y0, x1+1, y+1)
	if strip.Empty() || x0 < b.Max.X*3/4 {
		t.Fatalf("no colour bar strip found (%v)", strip)
	}
	// 0.45 cm at 150 dpi: 26.6 pixels
	if w := strip.Dx(); w < 24 || w > 29 {
		t.Errorf("strip %d pixels wide, want 0.45 cm (≈ 27)", w)
	}
	// its axis line: dark pixels just left of the strip down its height
	dark := 0
	for y := strip.Min.Y; y < strip.Min.Y+300; y++ {
		for x := strip.Min.X - 3; x < strip.Min.X; x++ {
			if c := nrgba(img, x, y); c.R < 0x80 && c.G < 0x80 && c.B < 0x80 {
				dark++
				break
			}
		}
	}
	if dark < 290 {
		t.Errorf("axis line beside the strip: %d of 300 rows dark", dark)
	}
	// nothing dark above the strip (a tick drawn under the strip showed there)
	for x := strip.Min.X; x < strip.Max.X; x++ {
		for y := strip.Min.Y - 3; y < strip.Min.Y; y++ {
			if c := nrgba(img, x, y); c.R < 0xc0 {
				t.Fatalf("pixel (%d, %d) above the strip is %v", x, y, c)
			}
		}
	}
}

// orderMap is a 4 × 3 map on uneven axes whose every cell differs.
func orderMap() (xs, ys, z []float64) {
	xs = []float64{0, 1, 4, 9}
	ys = []float64{0.05, 2, 3}
	z = make([]float64, len(xs)*len(ys))
	for i := range xs {
		for j := range ys {
			z[i*len(ys)+j] = float64(3*i*i + j)
		}
	}
	return xs, ys, z
}

// pixelsDiffer counts the pixels in which two images of one size differ.
func pixelsDiffer(a, b image.Image) int {
	diff := 0
	bnd := a.Bounds()
	for y := bnd.Min.Y; y < bnd.Max.Y; y++ {
		for x := bnd.Min.X; x < bnd.Max.X; x++ {
			if nrgba(a, x, y) != nrgba(b, x, y) {
				diff++
			}
		}
	}
	return diff
}

// The same map given with its axes descending draws the same image.
func TestHeatMapAxisOrder(t *testing.T) {
	xs, ys, z := orderMap()
	rx := []float64{9, 4, 1, 0}
	ry := []float64{3, 2, 0.05}
	rz := make([]float64, len(z))
	for i := range xs {
		for j := range ys {
			rz[(len(xs)-1-i)*len(ys)+(len(ys)-1-j)] = z[i*len(ys)+j]
		}
	}
	a, b := render(t, "order", xs, ys, z), render(t, "order", rx, ry, rz)
	if diff := pixelsDiffer(a, b); diff > 0 {
		t.Errorf("%d pixels differ between ascending and descending axes", diff)
	}
}

// Axis values given out of order (a list such as 4, 0, 9, 1) draw each
// cell between its neighbours in value: the same image as the sorted map.
func TestHeatMapUnsortedAxis(t *testing.T) {
	xs, ys, z := orderMap()
	perm := []int{2, 0, 3, 1} // xs 4, 0, 9, 1
	ux := make([]float64, len(xs))
	uz := make([]float64, len(z))
	for k, i := range perm {
		ux[k] = xs[i]
		copy(uz[k*len(ys):(k+1)*len(ys)], z[i*len(ys):(i+1)*len(ys)])
	}
	a, b := render(t, "unsorted_axis", xs, ys, z), render(t, "unsorted_axis", ux, ys, uz)
	if diff := pixelsDiffer(a, b); diff > 0 {
		t.Errorf("%d pixels differ between sorted and unsorted x values", diff)
	}
}
