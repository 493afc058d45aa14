package viewer

import (
	"errors"
	"image"
	"image/color"
	"image/draw"
	"math"
)

// ColorBarSpec describes a horizontal colour bar with ticks and units.
type ColorBarSpec struct {
	Colormap   *Colormap
	Min, Max   float64    // values at the bar's left and right ends
	Threshold  float64    // magnitude at or below which values are hidden (dimmed on the bar); 0 for none
	Units      string     // printed under the ticks
	Length     int        // bar length in pixels (default 256)
	Thickness  int        // bar thickness in pixels (default 14 × scale)
	Scale      int        // text scale (default 1)
	Background color.RGBA // zero: transparent
	Foreground color.RGBA // ticks and text (default white)
}

// ColorBar draws the bar: the colour map from Min to Max, the hidden range
// dimmed with the threshold marked, ticks at round numbers (Heckbert's "nice
// numbers", Graphics Gems, 1990) labelled, and the units below.
func ColorBar(spec ColorBarSpec) (*image.RGBA, error) {
	if spec.Colormap == nil {
		return nil, errors.New("viewer: colour bar without a colour map")
	}
	if !(spec.Max > spec.Min) || math.IsInf(spec.Max-spec.Min, 0) {
		return nil, errors.New("viewer: colour bar range is empty or not finite")
	}
	sc := max(spec.Scale, 1)
	length := spec.Length
	if length <= 1 {
		length = 256
	}
	thick := spec.Thickness
	if thick <= 0 {
		thick = 14 * sc
	}
	fg := spec.Foreground
	if fg == (color.RGBA{}) {
		fg = color.RGBA{R: 255, G: 255, B: 255, A: 255}
	}
	ticks := niceTicks(spec.Min, spec.Max, 5)
	labels := make([]string, len(ticks))
	margin := 0
	for i, t := range ticks {
		labels[i] = formatNumber(t)
		w, _ := TextSize(labels[i], sc)
		margin = max(margin, w/2+2)
	}
	tickLen := 4 * sc
	_, th := TextSize("0", sc)
	height := thick + tickLen + 2*sc + LineHeight(sc)
	if spec.Units != "" {
		height += LineHeight(sc)
	}
	img := image.NewRGBA(image.Rect(0, 0, length+2*margin, height))
	draw.Draw(img, img.Bounds(), image.NewUniform(spec.Background), image.Point{}, draw.Src)
	xOf := func(v float64) int {
		return margin + int(math.Round((v-spec.Min)/(spec.Max-spec.Min)*float64(length-1)))
	}
	for x := 0; x < length; x++ {
		v := spec.Min + (spec.Max-spec.Min)*float64(x)/float64(length-1)
		c := spec.Colormap.At((v - spec.Min) / (spec.Max - spec.Min))
		if hiddenOnBar(v, spec) {
			c = mix(c, spec.Background, 0.7)
		}
		for y := 0; y < thick; y++ {
			img.SetRGBA(margin+x, y, c)
		}
	}
	for _, t := range []float64{spec.Threshold, -spec.Threshold} {
		if spec.Threshold > 0 && t > spec.Min && t < spec.Max {
			for y := 0; y < thick; y++ {
				img.SetRGBA(xOf(t), y, fg)
			}
		}
	}
	for i, t := range ticks {
		x := xOf(t)
		for y := thick; y < thick+tickLen; y++ {
			img.SetRGBA(x, y, fg)
		}
		w, _ := TextSize(labels[i], sc)
		DrawText(img, image.Pt(x-w/2, thick+tickLen+2*sc), labels[i], fg, sc)
	}
	if spec.Units != "" {
		w, _ := TextSize(spec.Units, sc)
		DrawText(img, image.Pt((img.Rect.Dx()-w)/2, thick+tickLen+2*sc+LineHeight(sc)+(LineHeight(sc)-th)/2), spec.Units, fg, sc)
	}
	return img, nil
}

// hiddenOnBar reports whether value v is not drawn under the bar's threshold.
func hiddenOnBar(v float64, spec ColorBarSpec) bool {
	if spec.Colormap.Diverging() {
		return math.Abs(v) <= spec.Threshold
	}
	return v <= spec.Threshold
}

// OverlayColorBar draws the colour bar for overlay map o drawn in style st.
func OverlayColorBar(o *OverlayMap, st OverlayStyle, length, scale int, bg color.RGBA) (*image.RGBA, error) {
	p, err := st.resolve(o)
	if err != nil {
		return nil, err
	}
	lo := 0.0
	if p.signed {
		lo = -p.rng
	}
	return ColorBar(ColorBarSpec{Colormap: p.cm, Min: lo, Max: p.rng, Threshold: p.thr, Units: o.Units(),
		Length: length, Scale: scale, Background: bg})
}

// niceTicks returns round tick values within [lo, hi], about n of them, by
// Heckbert's nice-number rule (steps of 1, 2 or 5 times a power of ten).
func niceTicks(lo, hi float64, n int) []float64 {
	step := niceNumber((hi - lo) / float64(max(n-1, 1)))
	if !(step > 0) {
		return []float64{lo, hi}
	}
	var out []float64
	for k := math.Ceil(lo/step - 1e-9); k*step <= hi*(1+1e-12)+1e-12*step && len(out) < 50; k++ {
		v := k * step
		if math.Abs(v) < step*1e-9 {
			v = 0
		}
		out = append(out, v)
	}
	return out
}

// niceNumber rounds x to the nearest number of the form {1, 2, 5, 10}·10^k
// (Heckbert's rounding thresholds 1.5, 3 and 7).
func niceNumber(x float64) float64 {
	if !(x > 0) || math.IsInf(x, 0) {
		return 0
	}
	e := math.Floor(math.Log10(x))
	f := x / math.Pow(10, e)
	var nf float64
	switch {
	case f < 1.5:
		nf = 1
	case f < 3:
		nf = 2
	case f < 7:
		nf = 5
	default:
		nf = 10
	}
	return nf * math.Pow(10, e)
}

// mix returns a·(1-t) + b·t per channel, opaque.
func mix(a, b color.RGBA, t float64) color.RGBA {
	m := func(x, y uint8) uint8 { return uint8(float64(x)*(1-t) + float64(y)*t + 0.5) }
	return color.RGBA{R: m(a.R, b.R), G: m(a.G, b.G), B: m(a.B, b.B), A: 255}
}
