package plot

import (
	"bytes"
	"image/color"
	"os"
	"path/filepath"
	"testing"
)

// Axes may run downwards (GDD from +20 to -20 ps²) or hold one value.
func TestHeatMapDescendingAndSingle(t *testing.T) {
	pal := Dusk().Palette(256).Colors()
	for name, c := range map[string]struct{ xs, ys []float64 }{
		"descending": {[]float64{20, 10, 0, -10, -20}, []float64{1, 4, 9}},
		"one row":    {[]float64{-20, 0, 20}, []float64{5}},
	} {
		z := make([]float64, len(c.xs)*len(c.ys))
		for i := range z {
			z[i] = float64(i)
		}
		var b bytes.Buffer
		if err := HeatMap(&b, c.xs, c.ys, z, Options{Title: name, XLabel: "GDD (ps²)", YLabel: "power (µW)"}); err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		img := decode(t, b.Bytes())
		for _, col := range []color.NRGBA{pal[0].(color.NRGBA), pal[255].(color.NRGBA)} {
			if !hasColor(img, col, 2) {
				t.Errorf("%s: lacks colour %v", name, col)
			}
		}
		if dir := os.Getenv("GLISS_PLOT_DIR"); dir != "" {
			os.WriteFile(filepath.Join(dir, "heat_"+name+".png"), b.Bytes(), 0o644)
		}
	}
}
