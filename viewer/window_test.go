package viewer

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"testing"

	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

func TestWindowLinearHandValues(t *testing.T) {
	// DICOM PS3.3 C.11.2.1.2.1 (LINEAR), output 0..255:
	//   x <= c - 0.5 - (w-1)/2            → ymin
	//   x >  c - 0.5 + (w-1)/2            → ymax
	//   else ((x - (c-0.5))/(w-1) + 0.5)·(ymax-ymin) + ymin
	// Values worked by hand for c = 40, w = 80: the ramp runs over (0, 79].
	w := Window{Center: 40, Width: 80}
	cases := []struct{ x, want float64 }{
		{-1000, 0},
		{0, 0},                               // x = c - 0.5 - (w-1)/2 = 0 is still ymin
		{0.5, (-39.0/79 + 0.5) * 255},        // just inside: ((0.5-39.5)/79 + 0.5)·255 ≈ 1.614
		{39.5, 127.5},                        // x = c - 0.5 is mid-grey
		{40, (0.5/79 + 0.5) * 255},           // the centre itself is a little above mid-grey
		{79, 255},                            // x = c - 0.5 + (w-1)/2 = 79 reaches ymax on the ramp
		{79.0001, 255},                       // above: ymax
		{math.NaN(), 0},                      // our rule: NaN is ymin
		{math.Inf(1), 255},                   // beyond the window
		{math.Inf(-1), 0},                    //
		{20, ((20-39.5)/79 + 0.5) * 255},     // ≈ 64.56
		{60, ((60-39.5)/79 + 0.5) * 255},     // ≈ 193.67
		{78.5, ((78.5-39.5)/79 + 0.5) * 255}, // ≈ 253.39
	}
	for _, c := range cases {
		if got := w.Apply(c.x, 0, 255); math.Abs(got-c.want) > 1e-9 {
			t.Errorf("LINEAR c 40 w 80: x %v → %v, want %v", c.x, got, c.want)
		}
	}
	// w = 1 (the smallest LINEAR width): a step at c - 0.5; for c = 10, 9.5 is
	// ymin and anything above it ymax.
	step := Window{Center: 10, Width: 1}
	for x, want := range map[float64]float64{9: 0, 9.5: 0, 9.50001: 255, 10: 255} {
		if got := step.Apply(x, 0, 255); got != want {
			t.Errorf("LINEAR c 10 w 1: x %v → %v, want %v", x, got, want)
		}
	}
	// Output range other than 0..255 (ymin -1, ymax 1): mid-ramp is 0.
	if got := w.Apply(39.5, -1, 1); got != 0 {
		t.Errorf("LINEAR onto [-1, 1]: %v", got)
	}
}

func TestWindowLinearExactHandValues(t *testing.T) {
	// DICOM PS3.3 C.11.2.1.3.2 (LINEAR_EXACT): x <= c - w/2 → ymin, x > c + w/2
	// → ymax, else ((x - c)/w + 0.5)·(ymax - ymin) + ymin. For c 0.3, w 0.2
	// the ramp runs over (0.2, 0.4].
	w := Window{Center: 0.3, Width: 0.2, Function: VOILinearExact}
	for _, c := range []struct{ x, want float64 }{{0.2, 0}, {0.3, 127.5}, {0.35, 191.25}, {0.4, 255}, {0.41, 255}, {0.1, 0}} {
		if got := w.Apply(c.x, 0, 255); math.Abs(got-c.want) > 1e-9 {
			t.Errorf("LINEAR_EXACT: x %v → %v, want %v", c.x, got, c.want)
		}
	}
	// A LINEAR window narrower than 1 (not allowed by C.11.2.1.2) is applied
	// as LINEAR_EXACT, our rule; zero width is a step at the centre.
	narrow := Window{Center: 0.3, Width: 0.2}
	if got := narrow.Apply(0.35, 0, 255); math.Abs(got-191.25) > 1e-9 {
		t.Errorf("narrow LINEAR: %v", got)
	}
	zero := Window{Center: 5, Width: 0}
	if zero.Apply(5, 0, 255) != 0 || zero.Apply(5.01, 0, 255) != 255 {
		t.Errorf("zero width is not a step at the centre")
	}
}

func TestWindowMatchesPydicom(t *testing.T) {
	// Reference: python3-pydicom 2.3.1 apply_windowing, which implements
	// PS3.3 C.11.2.1.2.1 and C.11.2.1.3.2, run on the same inputs.
	refcheck.PythonModule(t, "pydicom")
	windows := []Window{
		{Center: 40, Width: 80},
		{Center: 10, Width: 1},
		{Center: 0.5, Width: 2},
		{Center: 1000, Width: 2001},
		{Center: -500, Width: 1500},
		{Center: 0.3, Width: 0.25, Function: VOILinearExact},
		{Center: -500, Width: 1500, Function: VOILinearExact},
	}
	var xs []float64
	for _, w := range windows {
		c, wd := w.Center-0.5, w.Width-1
		if w.Function == VOILinearExact {
			c, wd = w.Center, w.Width
		}
		for _, d := range []float64{-1, -0.5, -0.25, 0, 0.1, 0.25, 0.5, 1} {
			xs = append(xs, c+d*wd, c-wd/2-1e-3, c+wd/2+1e-3)
		}
	}
	xs = append(xs, -3000, 3000, 0, 1, 0.5)
	type spec struct {
		Windows [][3]any  `json:"windows"`
		X       []float64 `json:"x"`
	}
	in := spec{X: xs}
	for _, w := range windows {
		in.Windows = append(in.Windows, [3]any{w.Center, w.Width, w.Function.String()})
	}
	file := filepath.Join(t.TempDir(), "voi.json")
	b, _ := json.Marshal(in)
	if err := os.WriteFile(file, b, 0o644); err != nil {
		t.Fatal(err)
	}
	var ref [][]float64
	refcheck.RunPython(t, filepath.Join("testdata", "voi_reference.py"), &ref, file)
	for wi, w := range windows {
		for xi, x := range xs {
			got, want := w.Apply(x, 0, 255), ref[wi][xi]
			if math.Abs(got-want) > 1e-9 {
				t.Errorf("%v %v: x %v → %v, pydicom %v", w, w.Function, x, got, want)
			}
			if g := w.Gray(x); math.Abs(float64(g)-want) > 0.5+1e-9 {
				t.Errorf("%v: Gray(%v) = %d, pydicom %v", w, x, g, want)
			}
		}
	}
}

func TestLUT8MatchesApply(t *testing.T) {
	for _, w := range []Window{{Center: 40, Width: 80}, {Center: 10, Width: 1}, {Center: 0.3, Width: 0.2, Function: VOILinearExact}, {Center: 3, Width: -2}} {
		l := w.lut8()
		for x := -100.0; x <= 200; x += 0.37 {
			if got, want := l.gray(float32(x)), w.Gray(float64(float32(x))); got != want {
				t.Fatalf("%v: lut8 %v → %d, Gray %d", w, x, got, want)
			}
		}
		if l.gray(float32(math.NaN())) != 0 {
			t.Errorf("NaN is not black")
		}
	}
}

// lcg is a small deterministic pseudo-random sequence for test data.
func lcg(n int, seed uint64) []float32 {
	out := make([]float32, n)
	x := seed
	for i := range out {
		x = x*6364136223846793005 + 1442695040888963407
		out[i] = float32(x>>40) / float32(1<<24)
	}
	return out
}

func TestPercentileMatchesNumpy(t *testing.T) {
	// Reference: numpy.percentile (default "linear", Hyndman & Fan type 7).
	refcheck.PythonModule(t, "numpy")
	vals := lcg(5001, 7)
	for i := range vals {
		vals[i] = vals[i]*vals[i]*1000 - 100 // skewed, some negative
	}
	vals[3], vals[10] = float32(math.NaN()), float32(math.Inf(1)) // not finite: left out by us
	finite := []float32{}
	for _, v := range vals {
		if !math.IsNaN(float64(v)) && !math.IsInf(float64(v), 0) {
			finite = append(finite, v)
		}
	}
	ps := []float64{0, 0.5, 1, 2.5, 25, 50, 75, 99, 99.5, 100}
	file := filepath.Join(t.TempDir(), "p.json")
	b, _ := json.Marshal(map[string]any{"values": finite, "p": ps})
	if err := os.WriteFile(file, b, 0o644); err != nil {
		t.Fatal(err)
	}
	var ref []float64
	refcheck.RunPython(t, filepath.Join("testdata", "percentile_reference.py"), &ref, file)
	d := newDistribution(vals, false)
	for i, p := range ps {
		if got := d.percentile(p); math.Abs(got-ref[i]) > 1e-9*math.Max(1, math.Abs(ref[i])) {
			t.Errorf("p%v: %v, numpy %v", p, got, ref[i])
		}
	}
}

func TestPresets(t *testing.T) {
	// Whole-number data 0..999 (each value once): the 1-99 % preset must show
	// the 1st percentile and below as black and above the 99th as white.
	v := newVolume(t, [3]int{10, 10, 10}, volume.Identity(), func(i, j, k int) float32 { return float32(i + 10*j + 100*k) })
	s, err := NewScene(v)
	if err != nil {
		t.Fatal(err)
	}
	ps := map[string]Window{}
	for _, p := range s.Presets() {
		ps[p.ID] = p.Window
	}
	if _, ok := ps["scan"]; ok {
		t.Errorf("scan preset without a scan window")
	}
	w, ok := ps["p1-99"]
	if !ok || w.Function != VOILinear {
		t.Fatalf("p1-99 preset: %+v (%v)", w, ok)
	}
	lo, hi := s.Percentile(1), s.Percentile(99) // 9.99 and 989.01 (type 7 over 0..999)
	if math.Abs(lo-9.99) > 1e-9 || math.Abs(hi-989.01) > 1e-9 {
		t.Fatalf("percentiles %v %v", lo, hi)
	}
	if w.Apply(lo, 0, 255) != 0 || w.Apply(lo+1e-6, 0, 255) == 0 || w.Apply(hi, 0, 255) != 255 || w.Apply(hi+1e-6, 0, 255) != 255 {
		t.Errorf("p1-99 window %v does not span [%v, %v]", w, lo, hi)
	}
	if w.Apply(hi-1e-3, 0, 255) >= 255 {
		t.Errorf("p1-99 saturates before the 99th percentile")
	}
	if _, ok := ps["p0.5-99.5"]; !ok {
		t.Errorf("no 0.5-99.5 preset")
	}
	if _, ok := ps["brain"]; !ok {
		t.Errorf("no brain preset")
	}

	// The scan's own window (DICOM (0028,1050)/(0028,1051)) comes first and is the default.
	v.Meta.WindowCenter, v.Meta.WindowWidth = 300, 600
	s, _ = NewScene(v)
	if p := s.Presets()[0]; p.ID != "scan" || p.Window != (Window{Center: 300, Width: 600}) {
		t.Errorf("scan preset %+v", p)
	}
	if s.DefaultWindow() != (Window{Center: 300, Width: 600}) {
		t.Errorf("default window %+v", s.DefaultWindow())
	}

	// CT: the brain preset is the common-practice C 40 W 80 HU (from memory).
	v.Meta.Modality = "CT"
	s, _ = NewScene(v)
	for _, p := range s.Presets() {
		if p.ID == "brain" && p.Window != (Window{Center: 40, Width: 80}) {
			t.Errorf("CT brain preset %+v", p.Window)
		}
	}

	// Continuous data get LINEAR_EXACT windows.
	f := newVolume(t, [3]int{4, 4, 4}, volume.Identity(), func(i, j, k int) float32 { return float32(i+j+k) / 10 })
	sf, _ := NewScene(f)
	if w := sf.DefaultWindow(); w.Function != VOILinearExact || !(w.Width > 0) {
		t.Errorf("float data default window %+v", w)
	}
}

func TestBrainPresetOnPhantom(t *testing.T) {
	// The head phantom's foreground (Otsu) runs from skull (80) to scalp
	// (900): the brain preset keeps background black and brain (~700) grey,
	// distinct from ventricles (300).
	s, err := NewScene(headPhantom(t, [3]int{40, 48, 36}, [3]float64{4, 4, 4}))
	if err != nil {
		t.Fatal(err)
	}
	w := s.DefaultWindow()
	if w.Gray(0) != 0 {
		t.Errorf("background not black under %v", w)
	}
	if b, v := w.Gray(700), w.Gray(300); !(b > v+60 && b < 250) {
		t.Errorf("brain %d ventricles %d under %v", b, v, w)
	}
}

func TestDragWindow(t *testing.T) {
	v := newVolume(t, [3]int{10, 10, 10}, volume.Identity(), func(i, j, k int) float32 { return float32(i + 10*j + 100*k) })
	s, _ := NewScene(v)
	w := Window{Center: 500, Width: 400}
	d := s.DragWindow(w, 10, -5)
	if !(d.Width > w.Width && d.Center < w.Center) {
		t.Errorf("drag right/up: %v → %v", w, d)
	}
	if n := s.DragWindow(w, -1e6, 0); n.Width != 1 {
		t.Errorf("LINEAR width floor: %v", n)
	}
}
