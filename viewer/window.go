package viewer

import (
	"fmt"
	"math"
	"strings"
)

// VOIFunction is the DICOM VOI LUT Function (0028,1056) used by a Window.
type VOIFunction int

const (
	// VOILinear is "LINEAR", DICOM PS3.3 C.11.2.1.2.1, the default when
	// (0028,1056) is absent. It assumes whole-number stored values (hence
	// c - 0.5 and w - 1) and needs a width of at least 1.
	VOILinear VOIFunction = iota
	// VOILinearExact is "LINEAR_EXACT", DICOM PS3.3 C.11.2.1.3.2, for
	// continuous values; any width above 0.
	VOILinearExact
)

// String is the DICOM defined term.
func (f VOIFunction) String() string {
	if f == VOILinearExact {
		return "LINEAR_EXACT"
	}
	return "LINEAR"
}

// Window is a window centre and width (DICOM (0028,1050) and (0028,1051)) in
// the units of the voxel values (after rescale), with its VOI function.
type Window struct {
	Center, Width float64
	Function      VOIFunction
}

// String formats the window for display, e.g. "C 40 W 80".
func (w Window) String() string {
	return fmt.Sprintf("C %s W %s", formatNumber(w.Center), formatNumber(w.Width))
}

// voi holds a window in the shared form of both VOI functions:
// y = ((x - c) / w + 0.5) · (ymax - ymin) + ymin between lower and upper.
type voi struct {
	c, w, lower, upper float64
	step               bool // zero width: everything above c is ymax
}

// prepare turns the window into the form of its VOI function. A LINEAR
// window narrower than 1, which PS3.3 C.11.2.1.2 does not allow, is applied
// as LINEAR_EXACT (our rule); a width of 0, below 0 or not finite becomes a
// step at the centre.
func (w Window) prepare() voi {
	c, width := w.Center, w.Width
	if w.Function == VOILinear && width >= 1 {
		// PS3.3 C.11.2.1.2.1: the LINEAR function uses c - 0.5 and w - 1.
		c, width = c-0.5, width-1
		if width == 0 {
			// w = 1: x <= c - 0.5 is ymin and x > c - 0.5 is ymax.
			return voi{c: c, lower: c, upper: c, step: true}
		}
	}
	if !(width > 0) || math.IsInf(width, 0) || math.IsNaN(c) {
		return voi{c: c, lower: c, upper: c, step: true}
	}
	return voi{c: c, w: width, lower: c - width/2, upper: c + width/2}
}

// at maps x to [ymin, ymax]; NaN maps to ymin.
func (v voi) at(x, ymin, ymax float64) float64 {
	switch {
	case math.IsNaN(x) || x <= v.lower:
		return ymin
	case x > v.upper || v.step:
		return ymax
	}
	return ((x-v.c)/v.w+0.5)*(ymax-ymin) + ymin
}

// Apply maps the value x through the window to the output range [ymin,
// ymax] by the piecewise formula of DICOM PS3.3 C.11.2.1.2.1 (LINEAR):
//
//	if x <= c - 0.5 - (w-1)/2, then y = ymin
//	else if x > c - 0.5 + (w-1)/2, then y = ymax
//	else y = ((x - (c - 0.5)) / (w-1) + 0.5) * (ymax - ymin) + ymin
//
// or of C.11.2.1.3.2 (LINEAR_EXACT) with c and w in place of c - 0.5 and w - 1.
// NaN maps to ymin.
func (w Window) Apply(x, ymin, ymax float64) float64 { return w.prepare().at(x, ymin, ymax) }

// Gray returns the 8-bit display grey level of x (Apply onto 0..255, rounded).
func (w Window) Gray(x float64) uint8 { return uint8(w.Apply(x, 0, 255) + 0.5) }

// lut8 is a prepared window for 8-bit output.
type lut8 struct{ v voi }

func (w Window) lut8() lut8 { return lut8{v: w.prepare()} }

// gray is Gray with the window prepared once.
func (l *lut8) gray(x float32) uint8 {
	f := float64(x)
	switch {
	case f <= l.v.lower || f != f:
		return 0
	case f > l.v.upper || l.v.step:
		return 255
	}
	return uint8(((f-l.v.c)/l.v.w+0.5)*255 + 0.5)
}

// Preset is a named window for the scan.
type Preset struct {
	ID     string // stable key: "scan", "p1-99", "p0.5-99.5", "brain"
	Label  string // for menus
	Window Window
}

// RangeWindow returns the window that shows values at or below lo as black
// and values above hi as white, with the VOI function suited to the data:
// LINEAR for whole-number data, LINEAR_EXACT otherwise.
func (s *Scene) RangeWindow(lo, hi float64) Window {
	if s.integer {
		// Inverting PS3.3 C.11.2.1.2.1: lower = c - 0.5 - (w-1)/2, upper = c - 0.5 + (w-1)/2.
		return Window{Center: (lo+hi)/2 + 0.5, Width: math.Max(1, hi-lo+1), Function: VOILinear}
	}
	w := hi - lo
	if !(w > 0) {
		w = math.Max(1e-6*math.Abs(lo), 1e-12)
	}
	return Window{Center: (lo + hi) / 2, Width: w, Function: VOILinearExact}
}

// ScanWindow returns the window the scan itself records (DICOM Window
// Center/Width, first value) and whether there is one.
func (s *Scene) ScanWindow() (Window, bool) {
	m := s.vol.Meta
	if !(m.WindowWidth > 0) || math.IsInf(m.WindowWidth, 0) || math.IsNaN(m.WindowCenter) || math.IsInf(m.WindowCenter, 0) {
		return Window{}, false
	}
	// (0028,1056) is not carried in Metadata; absent, it means LINEAR (PS3.3 C.11.2.1.2).
	return Window{Center: m.WindowCenter, Width: m.WindowWidth, Function: VOILinear}, true
}

// Presets returns the window presets for the scan: its own window when it
// records one, percentile ranges of the voxel values, and a brain preset
// (for CT the common-practice brain window C 40 W 80 HU, quoted from memory;
// otherwise the range from the 0.5th percentile of all voxels to the 99th
// percentile of the head foreground found by Otsu's threshold).
func (s *Scene) Presets() []Preset {
	var out []Preset
	if w, ok := s.ScanWindow(); ok {
		out = append(out, Preset{ID: "scan", Label: "Scan's own window", Window: w})
	}
	if s.values.empty() {
		return out
	}
	for _, r := range [][2]float64{{1, 99}, {0.5, 99.5}} {
		w := s.RangeWindow(s.values.percentile(r[0]), s.values.percentile(r[1]))
		id := fmt.Sprintf("p%s-%s", formatNumber(r[0]), formatNumber(r[1]))
		out = append(out, Preset{ID: id, Label: fmt.Sprintf("Range %s-%s %%", formatNumber(r[0]), formatNumber(r[1])), Window: w})
	}
	return append(out, s.brainPreset())
}

func (s *Scene) brainPreset() Preset {
	if strings.EqualFold(s.vol.Meta.Modality, "CT") {
		return Preset{ID: "brain", Label: "Brain (CT C 40 W 80)", Window: Window{Center: 40, Width: 80}}
	}
	fg := s.values.above(s.values.otsu())
	hi := fg.percentile(99)
	if fg.empty() {
		hi = s.values.max()
	}
	w := s.RangeWindow(s.values.percentile(0.5), hi)
	return Preset{ID: "brain", Label: "Brain (foreground)", Window: w}
}

// DefaultWindow is the window a scan opens with: its own window when it
// records one, else the brain preset.
func (s *Scene) DefaultWindow() Window {
	if w, ok := s.ScanWindow(); ok {
		return w
	}
	if s.values.empty() {
		return Window{Center: 0.5, Width: 1, Function: VOILinearExact}
	}
	return s.brainPreset().Window
}

// Percentile returns the p-th percentile (0..100) of the scan's finite voxel
// values (exact up to 2^21 voxels, from a regular sample above), NaN when
// there are none.
func (s *Scene) Percentile(p float64) float64 { return s.values.percentile(p) }

// DragWindow adjusts w for a mouse drag of (dx, dy) pixels: right widens the
// window (less contrast), down raises the centre (darker image). One pixel
// moves by 1/256 of the scan's 0.5-99.5 % range.
func (s *Scene) DragWindow(w Window, dx, dy float64) Window {
	step := (s.values.percentile(99.5) - s.values.percentile(0.5)) / 256
	if !(step > 0) {
		step = 1
	}
	w.Center += dy * step
	w.Width += dx * step
	minWidth := 1.0
	if w.Function == VOILinearExact {
		minWidth = step / 16
	}
	w.Width = math.Max(w.Width, minWidth)
	return w
}

// formatNumber prints x with up to four significant decimals, no trailing zeros.
func formatNumber(x float64) string {
	if x == math.Trunc(x) && math.Abs(x) < 1e15 {
		return fmt.Sprintf("%.0f", x)
	}
	ax := math.Abs(x)
	switch {
	case ax >= 1e5 || ax < 1e-3:
		return fmt.Sprintf("%.3g", x)
	case ax >= 100:
		return strings.TrimRight(strings.TrimRight(fmt.Sprintf("%.1f", x), "0"), ".")
	}
	return strings.TrimRight(strings.TrimRight(fmt.Sprintf("%.3f", x), "0"), ".")
}
