package viewer

import (
	"fmt"
	"image/color"
	"math"
	"sync"
)

// Oklab (Ottosson 2020, "A perceptual color space for image processing") is
// the space our colour maps are built in: roughly perceptually uniform, with
// lightness L in 0..1 and opponent axes a, b. The matrices below are the
// published ones for linear sRGB (quoted from memory; colour_test.go checks
// them against the space's defining properties: white maps to L = 1,
// a = b = 0, greys to a = b = 0, and the two directions invert each other).
type oklab struct{ L, A, B float64 }

func linearToOklab(r, g, b float64) oklab {
	l := math.Cbrt(0.4122214708*r + 0.5363325363*g + 0.0514459929*b)
	m := math.Cbrt(0.2119034982*r + 0.6806995451*g + 0.1073969566*b)
	s := math.Cbrt(0.0883024619*r + 0.2817188376*g + 0.6299787005*b)
	return oklab{
		L: 0.2104542553*l + 0.7936177850*m - 0.0040720468*s,
		A: 1.9779984951*l - 2.4285922050*m + 0.4505937099*s,
		B: 0.0259040371*l + 0.7827717662*m - 0.8086757660*s,
	}
}

func (o oklab) linear() (r, g, b float64) {
	l := o.L + 0.3963377774*o.A + 0.2158037573*o.B
	m := o.L - 0.1055613458*o.A - 0.0638541728*o.B
	s := o.L - 0.0894841775*o.A - 1.2914855480*o.B
	l, m, s = l*l*l, m*m*m, s*s*s
	return 4.0767416621*l - 3.3077115913*m + 0.2309699292*s,
		-1.2684380046*l + 2.6097574011*m - 0.3413193965*s,
		-0.0041960863*l - 0.7034186147*m + 1.7076147010*s
}

// lch builds an Oklab colour from lightness, chroma and hue in degrees.
func lch(L, C, hDeg float64) oklab {
	h := hDeg * math.Pi / 180
	return oklab{L: L, A: C * math.Cos(h), B: C * math.Sin(h)}
}

func (o oklab) dist(p oklab) float64 {
	return math.Sqrt((o.L-p.L)*(o.L-p.L) + (o.A-p.A)*(o.A-p.A) + (o.B-p.B)*(o.B-p.B))
}

func (o oklab) lerp(p oklab, t float64) oklab {
	return oklab{o.L + t*(p.L-o.L), o.A + t*(p.A-o.A), o.B + t*(p.B-o.B)}
}

// inGamut reports whether o is displayable in sRGB.
func (o oklab) inGamut() bool {
	r, g, b := o.linear()
	const eps = 1e-9
	return r >= -eps && r <= 1+eps && g >= -eps && g <= 1+eps && b >= -eps && b <= 1+eps
}

// maxChroma is the largest chroma displayable in sRGB at lightness L and hue h.
func maxChroma(L, hDeg float64) float64 {
	lo, hi := 0.0, 0.5
	for i := 0; i < 40; i++ {
		mid := (lo + hi) / 2
		if lch(L, mid, hDeg).inGamut() {
			lo = mid
		} else {
			hi = mid
		}
	}
	return lo
}

// srgbEncode applies the sRGB transfer function (IEC 61966-2-1) to a linear value.
func srgbEncode(v float64) float64 {
	v = math.Max(0, math.Min(1, v))
	if v <= 0.0031308 {
		return 12.92 * v
	}
	return 1.055*math.Pow(v, 1/2.4) - 0.055
}

// srgbDecode is the inverse of srgbEncode.
func srgbDecode(v float64) float64 {
	if v <= 0.04045 {
		return v / 12.92
	}
	return math.Pow((v+0.055)/1.055, 2.4)
}

// Colormap is a table of opaque colours for values from 0 to 1. Ours are
// built in Oklab along a path of rising (sequential) or mirrored
// (diverging) lightness, clipped to the sRGB gamut by reducing chroma at
// fixed lightness and hue, and spaced at equal Oklab distances so that equal
// value steps look like equal colour steps.
type Colormap struct {
	name      string
	diverging bool
	table     []color.RGBA
	srgb      [][3]float64 // the same colours before 8-bit rounding, sRGB-encoded 0..1
}

// Name is the colour map's name.
func (c *Colormap) Name() string { return c.name }

// Diverging reports whether the map is for signed values, neutral at its middle.
func (c *Colormap) Diverging() bool { return c.diverging }

// Len is the number of table entries.
func (c *Colormap) Len() int { return len(c.table) }

// Entry returns table entry i (clamped to the table).
func (c *Colormap) Entry(i int) color.RGBA { return c.table[clampInt(i, 0, len(c.table)-1)] }

// At returns the colour for t in 0..1 (clamped), from the nearest entry.
func (c *Colormap) At(t float64) color.RGBA {
	if math.IsNaN(t) {
		t = 0
	}
	return c.Entry(roundHalfUp(math.Max(0, math.Min(1, t)) * float64(len(c.table)-1)))
}

// The colour maps are computed once, on first use, and never change after:
// a Colormap is immutable, so every caller can share the same table.
var (
	emberOnce = sync.OnceValue(buildEmber)
	tideOnce  = sync.OnceValue(buildTide)
)

// Ember is our sequential colour map for positive values: from a deep red
// through orange to a pale yellow, lightness rising evenly (Oklab L from
// 0.40 to 0.97), hue turning from 25° to 100°.
func Ember() *Colormap { return emberOnce() }

// Tide is our diverging colour map for signed values: blue (Oklab hue 275°)
// for negative, a near-white neutral (L 0.97, no chroma) at zero, red-orange
// (hue 45°) for positive, both ends at L 0.50. Both halves share one Oklab lightness and chroma
// profile, so equal magnitudes of either sign look equally strong; the hue
// pair is the one, among those we tried, for which CIE L* of mirrored
// entries also agrees (within 0.75) while both ends stay vivid.
func Tide() *Colormap { return tideOnce() }

func buildEmber() *Colormap {
	path := func(t float64) oklab {
		// Anchors (L, C, h) at t = 0, 0.5, 1, chosen by us.
		a := [3][3]float64{{0.40, 0.15, 25}, {0.70, 0.18, 55}, {0.97, 0.07, 100}}
		seg, u := 0, 2*t
		if t > 0.5 {
			seg, u = 1, 2*t-1
		}
		p, q := a[seg], a[seg+1]
		L, C, h := p[0]+u*(q[0]-p[0]), p[1]+u*(q[1]-p[1]), p[2]+u*(q[2]-p[2])
		return lch(L, math.Min(C, maxChroma(L, h)), h)
	}
	return buildColormap("ember", false, evenSpaced(path, 256))
}

func buildTide() *Colormap {
	const hNeg, hPos = 275.0, 45.0
	half := func(s float64) (L, C float64) {
		L = 0.97 - 0.47*s
		C = math.Min(0.2*s, math.Min(maxChroma(L, hNeg), maxChroma(L, hPos)))
		return L, C
	}
	pos := evenSpaced(func(s float64) oklab { L, C := half(s); return lch(L, C, hPos) }, 129)
	neg := make([]oklab, len(pos))
	for i, p := range pos {
		C := math.Hypot(p.A, p.B)
		neg[i] = lch(p.L, C, hNeg)
	}
	cols := make([]oklab, 0, 2*len(pos)-1)
	for i := len(neg) - 1; i > 0; i-- {
		cols = append(cols, neg[i])
	}
	cols = append(cols, pos...)
	return buildColormap("tide", true, cols)
}

// Colormaps lists our colour maps.
func Colormaps() []*Colormap { return []*Colormap{Ember(), Tide()} }

// ColormapNamed returns the colour map with the given name.
func ColormapNamed(name string) (*Colormap, error) {
	for _, c := range Colormaps() {
		if c.name == name {
			return c, nil
		}
	}
	return nil, fmt.Errorf("viewer: no colour map named %q (have ember, tide)", name)
}

// evenSpaced samples path (t in 0..1) densely and returns n colours at equal
// Oklab arc length along it.
func evenSpaced(path func(t float64) oklab, n int) []oklab {
	const dense = 4096
	pts := make([]oklab, dense+1)
	arc := make([]float64, dense+1)
	for i := range pts {
		pts[i] = path(float64(i) / dense)
		if i > 0 {
			arc[i] = arc[i-1] + pts[i].dist(pts[i-1])
		}
	}
	out := make([]oklab, n)
	j := 0
	for k := range out {
		target := arc[dense] * float64(k) / float64(n-1)
		for j < dense-1 && arc[j+1] < target {
			j++
		}
		seg := arc[j+1] - arc[j]
		u := 0.0
		if seg > 0 {
			u = math.Max(0, math.Min(1, (target-arc[j])/seg))
		}
		out[k] = pts[j].lerp(pts[j+1], u)
	}
	return out
}

func buildColormap(name string, diverging bool, cols []oklab) *Colormap {
	c := &Colormap{name: name, diverging: diverging, table: make([]color.RGBA, len(cols)), srgb: make([][3]float64, len(cols))}
	for i, o := range cols {
		r, g, b := o.linear()
		s := [3]float64{srgbEncode(r), srgbEncode(g), srgbEncode(b)}
		c.srgb[i] = s
		c.table[i] = color.RGBA{R: to8(s[0]), G: to8(s[1]), B: to8(s[2]), A: 255}
	}
	return c
}

func to8(v float64) uint8 { return uint8(math.Max(0, math.Min(255, v*255+0.5))) }
