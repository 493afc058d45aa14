package viewer

import (
	"math"
	"testing"

	"brightfold/internal/volume"
)

// expectedIndex gives, for an RAS volume, the voxel a pixel (u, v) must show
// by the display conventions in the package documentation, written out per
// plane by hand: radiological axial/coronal put the patient's right (high i)
// on the image left, anterior (high j) and superior (high k) are at the top,
// sagittal puts anterior on the left.
func expectedIndex(d [3]int, pl Plane, c Convention, slice, u, v int) [3]int {
	col := func(n int) int {
		if c == Neurological {
			return u
		}
		return n - 1 - u
	}
	switch pl {
	case Axial:
		return [3]int{col(d[0]), d[1] - 1 - v, slice}
	case Coronal:
		return [3]int{col(d[0]), slice, d[2] - 1 - v}
	}
	return [3]int{slice, d[1] - 1 - u, d[2] - 1 - v}
}

func TestSliceMatchesDirectIndexing(t *testing.T) {
	dims := [3]int{5, 6, 7}
	v := newVolume(t, dims, volume.Diag([3]float64{2, 2, 2}, [3]float64{-4, -5, -6}), code)
	s, err := NewScene(v)
	if err != nil {
		t.Fatal(err)
	}
	for _, interp := range []Interp{Nearest, Linear} {
		for _, c := range []Convention{Radiological, Neurological} {
			for _, pl := range Planes() {
				for slice := 0; slice < s.SliceCount(pl); slice++ {
					var ijk [3]float64
					ijk[pl.layout().slice] = float64(slice) // RAS volume: world axis = voxel axis
					f := s.Frame(pl, s.VoxelToWorld(ijk), c, 0)
					if f.Slice != slice {
						t.Fatalf("%v slice %d: frame slice %d", pl, slice, f.Slice)
					}
					vals := s.Sample(f, interp)
					for y := 0; y < f.Height; y++ {
						for x := 0; x < f.Width; x++ {
							e := expectedIndex(dims, pl, c, slice, x, y)
							if got, want := vals.At(x, y), v.At(e[0], e[1], e[2]); got != want {
								t.Fatalf("%v %v %v slice %d pixel (%d,%d): %v, voxel %v holds %v", interp, c, pl, slice, x, y, got, e, want)
							}
						}
					}
				}
			}
		}
	}
}

// flipped returns v stored in another orientation (axes flipped where flip
// is set), with the affine adjusted so that every voxel keeps its RAS position.
func flipped(t *testing.T, v *volume.Volume, flip [3]bool) *volume.Volume {
	d := v.Dims
	f := volume.Identity()
	for a := 0; a < 3; a++ {
		if flip[a] {
			f[a][a], f[a][3] = -1, float64(d[a]-1)
		}
	}
	w := newVolume(t, d, v.Affine.Mul(f), func(i, j, k int) float32 {
		p := f.Apply([3]float64{float64(i), float64(j), float64(k)})
		return v.At(int(p[0]), int(p[1]), int(p[2]))
	})
	return w
}

func TestOrientationIndependent(t *testing.T) {
	// The same anatomy stored RAS and as LPS / LPI / RAI must render identically,
	// with identical letters: planes come from the affine, not from storage order.
	v := newVolume(t, [3]int{6, 5, 4}, volume.Diag([3]float64{1, 1.5, 3}, [3]float64{10, -3, 7}), code)
	ref, err := NewScene(v)
	if err != nil {
		t.Fatal(err)
	}
	at := ref.VoxelToWorld([3]float64{2, 3, 1})
	for _, fl := range [][3]bool{{true, true, false}, {true, true, true}, {false, false, true}} {
		w := flipped(t, v, fl)
		s, err := NewScene(w)
		if err != nil {
			t.Fatal(err)
		}
		for _, pl := range Planes() {
			for _, interp := range []Interp{Nearest, Linear} {
				fr, fw := ref.Frame(pl, at, Radiological, 0), s.Frame(pl, at, Radiological, 0)
				a, b := ref.Sample(fr, interp), s.Sample(fw, interp)
				if fr.Letters() != fw.Letters() || a.Width != b.Width || a.Height != b.Height {
					t.Fatalf("%s %v: frames differ: %+v vs %+v", w.Affine.Orientation(), pl, fr.Letters(), fw.Letters())
				}
				for i := range a.V {
					if a.V[i] != b.V[i] && !(a.V[i] != a.V[i] && b.V[i] != b.V[i]) {
						t.Fatalf("%s %v %v pixel %d: %v vs %v", w.Affine.Orientation(), pl, interp, i, b.V[i], a.V[i])
					}
				}
			}
		}
	}
}

func TestLetters(t *testing.T) {
	v := newVolume(t, [3]int{4, 4, 4}, volume.Diag([3]float64{1, 1, 1}, [3]float64{}), code)
	s, _ := NewScene(v)
	// Letters of each edge by the conventions in the package documentation.
	want := map[Convention]map[Plane]Letters{
		Radiological: {Axial: {"R", "L", "A", "P"}, Coronal: {"R", "L", "S", "I"}, Sagittal: {"A", "P", "S", "I"}},
		Neurological: {Axial: {"L", "R", "A", "P"}, Coronal: {"L", "R", "S", "I"}, Sagittal: {"A", "P", "S", "I"}},
	}
	for c, m := range want {
		for pl, l := range m {
			if got := s.Frame(pl, s.Center(), c, 0).Letters(); got != l {
				t.Errorf("%v %v: letters %+v, want %+v", c, pl, got, l)
			}
		}
	}
}

func TestAnisotropicPhysicalSize(t *testing.T) {
	// 1 × 1.5 × 4 mm voxels: every pixel is 1 mm square, so each image side
	// spans the volume's physical extent along it (n · spacing mm).
	dims := [3]int{20, 16, 9}
	sp := [3]float64{1, 1.5, 4}
	v := newVolume(t, dims, volume.Diag(sp, [3]float64{}), code)
	s, _ := NewScene(v)
	ext := [3]float64{20, 24, 36}
	cases := []struct {
		pl         Plane
		colW, rowW int
	}{{Axial, 0, 1}, {Coronal, 0, 2}, {Sagittal, 1, 2}}
	for _, c := range cases {
		f := s.Frame(c.pl, s.Center(), Radiological, 0)
		if f.PixelMM != 1 {
			t.Fatalf("%v: pixel %g mm, want the smallest spacing 1", c.pl, f.PixelMM)
		}
		if got := float64(f.Width) * f.PixelMM; got != ext[c.colW] {
			t.Errorf("%v: width %g mm, want %g", c.pl, got, ext[c.colW])
		}
		if got := float64(f.Height) * f.PixelMM; got != ext[c.rowW] {
			t.Errorf("%v: height %g mm, want %g", c.pl, got, ext[c.rowW])
		}
		// A pixel shows the voxel whose extent holds the pixel's centre
		// (counted from the top-left edge): walking down the coronal image,
		// the 4 mm slices change every 4 pixels.
		vals := s.Sample(f, Nearest)
		for y := 0; y < f.Height; y++ {
			for x := 0; x < f.Width; x++ {
				var ijk [3]int
				ijk[c.colW] = int((float64(x) + 0.5) * f.PixelMM / sp[c.colW])
				ijk[c.rowW] = int((float64(y) + 0.5) * f.PixelMM / sp[c.rowW])
				ijk[c.colW] = dims[c.colW] - 1 - ijk[c.colW] // R (axial/coronal) or A (sagittal) on the left
				ijk[c.rowW] = dims[c.rowW] - 1 - ijk[c.rowW] // A or S at the top
				ijk[c.pl.layout().slice] = f.Slice
				if got, want := vals.At(x, y), v.At(ijk[0], ijk[1], ijk[2]); got != want {
					t.Fatalf("%v pixel (%d,%d): %v, want voxel %v = %v", c.pl, x, y, got, ijk, want)
				}
			}
		}
	}
	// A coarser requested pixel keeps the physical extent within one pixel.
	f := s.Frame(Coronal, s.Center(), Radiological, 3)
	if f.Width != 7 || f.Height != 12 {
		t.Errorf("coronal at 3 mm: %dx%d, want 7x12 (20 mm → 7 px, 36 mm → 12 px)", f.Width, f.Height)
	}
}

func TestPixelVoxelWorldRoundTrip(t *testing.T) {
	a := volume.Diag([3]float64{0.9, 1.3, 3.1}, [3]float64{-40, 12, -7})
	// Add a small rotation about S so the affine is oblique.
	th := 7 * math.Pi / 180
	rot := volume.Affine{{math.Cos(th), -math.Sin(th), 0, 0}, {math.Sin(th), math.Cos(th), 0, 0}, {0, 0, 1, 0}, {0, 0, 0, 1}}
	v := newVolume(t, [3]int{30, 20, 10}, rot.Mul(a), code)
	s, err := NewScene(v)
	if err != nil {
		t.Fatal(err)
	}
	if ob := s.Obliquity(); math.Abs(ob-7) > 1e-9 {
		t.Errorf("obliquity %g°, want 7°", ob)
	}
	for _, c := range []Convention{Radiological, Neurological} {
		for _, pl := range Planes() {
			f := s.Frame(pl, s.Center(), c, 0.7)
			for _, px := range [][2]float64{{0.5, 0.5}, {3.25, 7.75}, {float64(f.Width) - 0.5, float64(f.Height) - 0.5}} {
				w := f.PixelToWorld(px[0], px[1])
				x, y := f.WorldToPixel(w)
				if math.Abs(x-px[0]) > 1e-9 || math.Abs(y-px[1]) > 1e-9 {
					t.Errorf("%v %v: pixel %v → %v → (%g, %g)", c, pl, px, w, x, y)
				}
				ijk := f.PixelToVoxel(px[0], px[1])
				if ijk[f.SliceAxis()] != float64(f.Slice) {
					t.Errorf("%v: pixel maps off the slice: %v", pl, ijk)
				}
				x, y = f.VoxelToPixel(ijk)
				if math.Abs(x-px[0]) > 1e-9 || math.Abs(y-px[1]) > 1e-9 {
					t.Errorf("%v: voxel round trip %v → (%g, %g)", pl, px, x, y)
				}
			}
		}
	}
}

func TestCrosshairAndReadout(t *testing.T) {
	dims := [3]int{8, 9, 10}
	v := newVolume(t, dims, volume.Diag([3]float64{2, 2, 2}, [3]float64{-7, -8, -9}), code)
	s, _ := NewScene(v)
	ijk := [3]int{6, 2, 5}
	at := s.VoxelToWorld(indexFloat(ijk))
	for _, pl := range Planes() {
		f := s.Frame(pl, at, Radiological, 0)
		ch := s.Crosshair(f, at)
		if ch.Voxel != ijk || !ch.Inside {
			t.Fatalf("%v: crosshair voxel %v inside %v, want %v", pl, ch.Voxel, ch.Inside, ijk)
		}
		// The crosshair sits on the centre of the pixel that shows the voxel,
		// and the readout there names that voxel, its RAS centre and value.
		if ch.X != math.Floor(ch.X)+0.5 || ch.Y != math.Floor(ch.Y)+0.5 {
			t.Errorf("%v: crosshair at (%g, %g), not a pixel centre", pl, ch.X, ch.Y)
		}
		e := expectedIndex(dims, pl, Radiological, f.Slice, int(ch.X), int(ch.Y))
		if e != ijk {
			t.Errorf("%v: crosshair pixel shows voxel %v, want %v", pl, e, ijk)
		}
		r := s.ReadoutAt(f, ch.X, ch.Y, nil)
		if !r.Inside || r.Voxel != ijk || r.World != at || r.Value != v.At(6, 2, 5) {
			t.Errorf("%v: readout %+v", pl, r)
		}
	}
	f := s.Frame(Axial, at, Radiological, 0)
	if r := s.ReadoutAt(f, -1, 3, nil); r.Inside || r.String() != "outside the volume" {
		t.Errorf("readout left of the image: %+v", r)
	}
	if got := s.ReadoutAt(f, 0.5, 0.5, nil).String(); got != "voxel (7, 8, 5)  RAS (7.0, 8.0, 1.0) mm  value 20999" {
		t.Errorf("readout string %q", got)
	}
}

func TestStepSlice(t *testing.T) {
	v := newVolume(t, [3]int{4, 5, 6}, volume.Diag([3]float64{1, 1, 1}, [3]float64{}), code)
	s, _ := NewScene(v)
	p := s.VoxelToWorld([3]float64{1, 2, 3})
	if got := s.StepSlice(p, Axial, 2); got != [3]float64{1, 2, 5} {
		t.Errorf("axial +2: %v", got)
	}
	if got := s.StepSlice(p, Axial, 9); got != [3]float64{1, 2, 5} {
		t.Errorf("axial +9 stops at the last slice: %v", got)
	}
	if got := s.StepSlice(p, Sagittal, -4); got != [3]float64{0, 2, 3} {
		t.Errorf("sagittal -4 stops at the first slice: %v", got)
	}
	// Stored LPS, positive steps still go towards superior / anterior / right.
	w := flipped(t, v, [3]bool{true, true, false})
	sw, _ := NewScene(w)
	if got := sw.StepSlice(p, Coronal, 1); got != [3]float64{1, 3, 3} {
		t.Errorf("LPS coronal +1: %v", got)
	}
}

func TestNewSceneRefusesBadVolumes(t *testing.T) {
	good := volume.Diag([3]float64{1, 1, 1}, [3]float64{})
	cases := map[string]*volume.Volume{
		"nil":        nil,
		"short data": {Data: make([]float32, 5), Dims: [3]int{2, 2, 2}, Affine: good},
		"zero dim":   {Data: nil, Dims: [3]int{0, 2, 2}, Affine: good},
		"singular":   {Data: make([]float32, 8), Dims: [3]int{2, 2, 2}, Affine: volume.Diag([3]float64{1, 0, 1}, [3]float64{})},
		"NaN":        {Data: make([]float32, 8), Dims: [3]int{2, 2, 2}, Affine: volume.Diag([3]float64{1, math.NaN(), 1}, [3]float64{})},
	}
	for name, v := range cases {
		if _, err := NewScene(v); err == nil {
			t.Errorf("%s: accepted", name)
		}
	}
}

func TestViewport(t *testing.T) {
	// A viewport is a window onto the whole plane: its pixel (x, y) shows
	// what the whole frame shows at (x + dx, y + dy).
	v := newVolume(t, [3]int{12, 10, 8}, volume.Diag([3]float64{1, 2, 3}, [3]float64{-5, 4, 1}), code)
	s, _ := NewScene(v)
	for _, pl := range Planes() {
		whole := s.Frame(pl, s.Center(), Radiological, 0.5)
		centre := whole.PixelToWorld(7, 9)
		vp := whole.Viewport(centre, 6, 4)
		if vp.Width != 6 || vp.Height != 4 {
			t.Fatalf("viewport %dx%d", vp.Width, vp.Height)
		}
		a, b := s.Sample(whole, Nearest), s.Sample(vp, Nearest)
		for y := 0; y < 4; y++ {
			for x := 0; x < 6; x++ {
				if got, want := b.At(x, y), a.At(x+4, y+7); got != want {
					t.Fatalf("%v viewport (%d,%d): %v, whole (%d,%d): %v", pl, x, y, got, x+4, y+7, want)
				}
			}
		}
		if x, y := vp.WorldToPixel(centre); x != 3 || y != 2 {
			t.Errorf("%v: centre at (%g, %g), want the viewport's middle (3, 2)", pl, x, y)
		}
		r1, r2 := s.ReadoutAt(whole, 7.5, 9.5, nil), s.ReadoutAt(vp, 3.5, 2.5, nil)
		if r1 != r2 {
			t.Errorf("%v: readouts differ: %v vs %v", pl, r1, r2)
		}
		// Far off the volume: black, and the readout says outside.
		off := whole.Viewport([3]float64{1e4, 1e4, 1e4}, 3, 3)
		if !math.IsNaN(float64(s.Sample(off, Linear).At(1, 1))) || s.ReadoutAt(off, 1.5, 1.5, nil).Inside {
			t.Errorf("%v: viewport off the volume shows data", pl)
		}
	}
}
