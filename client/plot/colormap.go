package plot

import (
	"fmt"
	"image/color"
	"math"

	"gonum.org/v1/plot/palette"
)

// lch is a colour in OKLCh: OKLab lightness L (0 … 1), chroma C and hue h (deg).
type lch struct{ L, C, H float64 }

// duskStops are the anchors of gliss's "dusk" colour map, from night
// indigo through blue and teal to a pale straw yellow. Lightness rises
// steadily, so the map reads in grey scale too and small differences in
// counts look equally large anywhere on the scale.
var duskStops = []struct {
	at float64
	c  lch
}{
	{0.00, lch{0.20, 0.07, 300}},
	{0.30, lch{0.45, 0.11, 255}},
	{0.60, lch{0.66, 0.10, 190}},
	{0.82, lch{0.81, 0.13, 135}},
	{1.00, lch{0.95, 0.11, 100}},
}

// Gradient is a continuous colour map over [Min, Max] that interpolates
// OKLCh anchors and maps them to sRGB, reducing chroma where a colour
// falls outside the sRGB gamut (lightness is kept).
type Gradient struct {
	stops []struct {
		at float64
		c  lch
	}
	min, max float64
	alpha    float64
}

// Dusk is gliss's default colour map for counts (see duskStops).
func Dusk() *Gradient {
	g := &Gradient{max: 1, alpha: 1}
	for _, s := range duskStops {
		g.stops = append(g.stops, struct {
			at float64
			c  lch
		}{s.at, s.c})
	}
	return g
}

// Min, Max, SetMin, SetMax, Alpha and SetAlpha implement palette.ColorMap.
func (g *Gradient) Min() float64       { return g.min }
func (g *Gradient) Max() float64       { return g.max }
func (g *Gradient) SetMin(v float64)   { g.min = v }
func (g *Gradient) SetMax(v float64)   { g.max = v }
func (g *Gradient) Alpha() float64     { return g.alpha }
func (g *Gradient) SetAlpha(a float64) { g.alpha = a }

// At returns the colour of v; values outside [Min, Max] are errors, as
// palette.ColorMap asks.
func (g *Gradient) At(v float64) (color.Color, error) {
	if math.IsNaN(v) {
		return nil, fmt.Errorf("plot: colour of NaN")
	}
	if g.max <= g.min {
		return nil, fmt.Errorf("plot: colour map range %v … %v is empty", g.min, g.max)
	}
	if v < g.min {
		return nil, palette.ErrUnderflow
	}
	if v > g.max {
		return nil, palette.ErrOverflow
	}
	return g.at((v - g.min) / (g.max - g.min)), nil
}

// at returns the colour at t in [0, 1].
func (g *Gradient) at(t float64) color.NRGBA {
	s := g.stops
	k := 1
	for k < len(s)-1 && t > s[k].at {
		k++
	}
	a, b := s[k-1], s[k]
	u := (t - a.at) / (b.at - a.at)
	u = math.Max(0, math.Min(1, u))
	c := lch{a.c.L + u*(b.c.L-a.c.L), a.c.C + u*(b.c.C-a.c.C), a.c.H + u*(b.c.H-a.c.H)}
	r, gr, bl := c.toSRGB()
	return color.NRGBA{R: byte8(r), G: byte8(gr), B: byte8(bl), A: byte8(g.alpha)}
}

func byte8(v float64) uint8 { return uint8(math.Round(255 * math.Max(0, math.Min(1, v)))) }

// Palette implements palette.ColorMap: n colours evenly over the range.
func (g *Gradient) Palette(n int) palette.Palette {
	if n < 2 {
		n = 2
	}
	out := make(colors, n)
	for i := range out {
		out[i] = g.at(float64(i) / float64(n-1))
	}
	return out
}

type colors []color.Color

func (c colors) Colors() []color.Color { return c }

// toSRGB converts to gamma-encoded sRGB in [0, 1], halving the chroma
// interval until the colour is in gamut.
func (c lch) toSRGB() (r, g, b float64) {
	in := func(x float64) bool { return x >= -1e-9 && x <= 1+1e-9 }
	lo, hi := 0.0, c.C
	r, g, b = oklabToLinear(c.L, 0, 0)
	if ri, gi, bi := oklabToLinear(c.L, c.C*math.Cos(c.H*math.Pi/180), c.C*math.Sin(c.H*math.Pi/180)); in(ri) && in(gi) && in(bi) {
		r, g, b = ri, gi, bi
	} else {
		for range 30 {
			mid := (lo + hi) / 2
			ri, gi, bi := oklabToLinear(c.L, mid*math.Cos(c.H*math.Pi/180), mid*math.Sin(c.H*math.Pi/180))
			if in(ri) && in(gi) && in(bi) {
				lo, r, g, b = mid, ri, gi, bi
			} else {
				hi = mid
			}
		}
	}
	return gammaEncode(r), gammaEncode(g), gammaEncode(b)
}

// oklabToLinear converts OKLab to linear sRGB. Matrices from B. Ottosson,
// "A perceptual color space for image processing" (2020), the reference
// OKLab → linear sRGB conversion (memory).
func oklabToLinear(L, a, b float64) (r, g, bl float64) {
	l := L + 0.3963377774*a + 0.2158037573*b
	m := L - 0.1055613458*a - 0.0638541728*b
	s := L - 0.0894841775*a - 1.2914855480*b
	l, m, s = l*l*l, m*m*m, s*s*s
	r = 4.0767416621*l - 3.3077115913*m + 0.2309699292*s
	g = -1.2684380046*l + 2.6097574011*m - 0.3413193965*s
	bl = -0.0041960863*l - 0.7034186147*m + 1.7076147010*s
	return
}

// gammaEncode is the sRGB transfer function (IEC 61966-2-1).
func gammaEncode(x float64) float64 {
	x = math.Max(0, math.Min(1, x))
	if x <= 0.0031308 {
		return 12.92 * x
	}
	return 1.055*math.Pow(x, 1/2.4) - 0.055
}
