package plot

import (
	"bytes"
	"image"
	"image/color"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"testing"
)

// relLuminance is the WCAG relative luminance of an sRGB colour
// (IEC 61966-2-1 transfer function, Rec. 709 weights).
func relLuminance(c color.NRGBA) float64 {
	lin := func(v uint8) float64 {
		x := float64(v) / 255
		if x <= 0.04045 {
			return x / 12.92
		}
		return math.Pow((x+0.055)/1.055, 2.4)
	}
	return 0.2126*lin(c.R) + 0.7152*lin(c.G) + 0.0722*lin(c.B)
}

func TestOKLabWhiteAndBlack(t *testing.T) {
	// OKLab L=1, a=b=0 is the D65 white, L=0 black (Ottosson 2020).
	r, g, b := oklabToLinear(1, 0, 0)
	for _, v := range []float64{r, g, b} {
		if math.Abs(v-1) > 1e-3 {
			t.Errorf("OKLab white → linear sRGB %v %v %v", r, g, b)
		}
	}
	if r, g, b := oklabToLinear(0, 0, 0); r != 0 || g != 0 || b != 0 {
		t.Errorf("OKLab black → %v %v %v", r, g, b)
	}
}

func TestDuskRisesInLuminance(t *testing.T) {
	d := Dusk()
	pal := d.Palette(256).Colors()
	prev := -1.0
	for i, c := range pal {
		y := relLuminance(c.(color.NRGBA))
		if y <= prev {
			t.Fatalf("colour %d %v: luminance %.4f not above the previous %.4f", i, c, y, prev)
		}
		prev = y
	}
	lo, hi := relLuminance(pal[0].(color.NRGBA)), relLuminance(pal[255].(color.NRGBA))
	// WCAG contrast ratio (Y1+0.05)/(Y2+0.05) between the ends: ≥ 7 reads well.
	if cr := (hi + 0.05) / (lo + 0.05); cr < 7 {
		t.Errorf("contrast between the ends %.1f, want ≥ 7", cr)
	}
	d.SetMin(10)
	d.SetMax(20)
	if _, err := d.At(9); err == nil {
		t.Error("At below Min accepted")
	}
	if c, err := d.At(20); err != nil || c != pal[255] {
		t.Errorf("At(Max) = %v, %v; want %v", c, err, pal[255])
	}
}

func decode(t *testing.T, b []byte) image.Image {
	t.Helper()
	img, err := png.Decode(bytes.NewReader(b))
	if err != nil {
		t.Fatalf("not a PNG: %v", err)
	}
	return img
}

func hasColor(img image.Image, want color.NRGBA, tol int) bool {
	bnd := img.Bounds()
	for y := bnd.Min.Y; y < bnd.Max.Y; y++ {
		for x := bnd.Min.X; x < bnd.Max.X; x++ {
			c := color.NRGBAModel.Convert(img.At(x, y)).(color.NRGBA)
			d := func(a, b uint8) int {
				if a > b {
					return int(a - b)
				}
				return int(b - a)
			}
			if d(c.R, want.R) <= tol && d(c.G, want.G) <= tol && d(c.B, want.B) <= tol {
				return true
			}
		}
	}
	return false
}

func TestHeatMap(t *testing.T) {
	xs := []float64{-20, -10, 0, 10, 20}
	ys := []float64{0.05, 1, 4, 9, 16, 25} // uneven, as amplitude-spaced powers are
	z := make([]float64, len(xs)*len(ys))
	for i := range xs {
		for j := range ys {
			z[i*len(ys)+j] = float64(i*10 + j)
		}
	}
	z[7] = math.NaN()
	var b bytes.Buffer
	if err := HeatMap(&b, xs, ys, z, Options{Title: "XX counts", XLabel: "GDD (ps²)", YLabel: "power (µW)", ZLabel: "counts per gate"}); err != nil {
		t.Fatal(err)
	}
	img := decode(t, b.Bytes())
	// 16 cm × 12 cm at 150 dpi.
	if s := img.Bounds().Size(); s.X != 945 || s.Y != 709 {
		t.Errorf("size %v, want 945 × 709", s)
	}
	pal := Dusk().Palette(256).Colors()
	for _, c := range []color.NRGBA{pal[0].(color.NRGBA), pal[255].(color.NRGBA), NaNColor} {
		if !hasColor(img, c, 2) {
			t.Errorf("heat map lacks colour %v (lowest, highest cell or a missing point)", c)
		}
	}
	if dir := os.Getenv("GLISS_PLOT_DIR"); dir != "" {
		os.WriteFile(filepath.Join(dir, "heat_test.png"), b.Bytes(), 0o644)
	}

	for _, bad := range []struct {
		name   string
		xs, ys []float64
		z      []float64
	}{
		{"short z", xs, ys, z[:5]},
		{"no x", nil, ys, nil},
		{"NaN axis", []float64{0, math.NaN()}, ys, make([]float64, 2*len(ys))},
		{"all NaN", []float64{1}, []float64{1}, []float64{math.NaN()}},
	} {
		if err := HeatMap(&bytes.Buffer{}, bad.xs, bad.ys, bad.z, Options{}); err == nil {
			t.Errorf("%s: accepted", bad.name)
		}
	}
	// A constant map still draws (one colour).
	if err := HeatMap(&bytes.Buffer{}, []float64{1, 2}, []float64{1}, []float64{5, 5}, Options{}); err != nil {
		t.Errorf("constant map: %v", err)
	}
}

func TestLine(t *testing.T) {
	xs := []float64{0, 1, 2, 3, 4, 5}
	var b bytes.Buffer
	err := Line(&b, xs, []Series{{Name: "x", Y: []float64{1, 3, math.NaN(), 2, 4, 5}}, {Name: "xx", Y: []float64{0, 1, 2, 3, 2, 1}}},
		Options{Title: "Rabi", XLabel: "power (µW)", YLabel: "counts per gate"})
	if err != nil {
		t.Fatal(err)
	}
	img := decode(t, b.Bytes())
	for _, c := range lineColors[:2] {
		if !hasColor(img, c.(color.NRGBA), 2) {
			t.Errorf("line plot lacks series colour %v", c)
		}
	}
	if dir := os.Getenv("GLISS_PLOT_DIR"); dir != "" {
		os.WriteFile(filepath.Join(dir, "line_test.png"), b.Bytes(), 0o644)
	}
	if err := Line(&bytes.Buffer{}, xs, []Series{{Y: xs[:3]}}, Options{}); err == nil {
		t.Error("series shorter than xs accepted")
	}
	if err := Line(&bytes.Buffer{}, xs[:1], []Series{{Y: []float64{math.NaN()}}}, Options{}); err == nil {
		t.Error("all-NaN series accepted")
	}
}

// BenchmarkHeatMap draws a 101 × 101 map (a large measured map) as PNG.
func BenchmarkHeatMap(b *testing.B) {
	const n = 101
	xs, ys, z := make([]float64, n), make([]float64, n), make([]float64, n*n)
	for i := range n {
		xs[i], ys[i] = float64(i)-50, float64(i*i)/100
	}
	for i := range z {
		z[i] = math.Sin(float64(i) / 37)
	}
	var buf bytes.Buffer
	b.ReportAllocs()
	for b.Loop() {
		buf.Reset()
		if err := HeatMap(&buf, xs, ys, z, Options{Title: "bench", XLabel: "GDD (ps²)", YLabel: "power (µW)"}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(buf.Len())/1024, "KiB/png")
}
