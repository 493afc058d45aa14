package viewer

import (
	"path/filepath"
	"testing"

	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

// nibabelData is Debian python3-nibabel's test data folder.
const nibabelData = "/usr/lib/python3/dist-packages/nibabel/tests/data"

type canonicalRef struct {
	Orientation string
	Dims        [3]int
	Data        []float64
	Affine      [4][4]float64
	Centre      [3]float64
	Planes      map[string]struct {
		Width, Height int
		Values        []float64
	}
}

// TestPlanesMatchNibabelCanonical renders a stored-LAS NIfTI (nibabel's
// anatomical.nii) without reorienting it and compares each radiological
// plane with the same plane cut by index from nibabel's
// as_closest_canonical (RAS) copy: the viewer's reading of the affine must
// agree with nibabel's.
func TestPlanesMatchNibabelCanonical(t *testing.T) {
	refcheck.PythonModule(t, "nibabel")
	file := refcheck.Path(t, filepath.Join(nibabelData, "anatomical.nii"))
	var ref canonicalRef
	refcheck.RunPython(t, filepath.Join("testdata", "canonical_slices.py"), &ref, file)
	if ref.Orientation == "RAS" {
		t.Fatalf("reference file is already RAS; the test needs another orientation")
	}
	v := &volume.Volume{Dims: ref.Dims, Affine: volume.Affine(ref.Affine), Data: make([]float32, len(ref.Data))}
	for i, x := range ref.Data {
		v.Data[i] = float32(x)
	}
	s, err := NewScene(v)
	if err != nil {
		t.Fatal(err)
	}
	for _, pl := range Planes() {
		want := ref.Planes[pl.String()]
		f := s.Frame(pl, ref.Centre, Radiological, 0)
		got := s.Sample(f, Nearest)
		if got.Width != want.Width || got.Height != want.Height {
			t.Fatalf("%v: %dx%d, nibabel %dx%d", pl, got.Width, got.Height, want.Width, want.Height)
		}
		for i, w := range want.Values {
			if float64(got.V[i]) != w {
				t.Fatalf("%v pixel (%d, %d): %v, nibabel canonical %v", pl, i%want.Width, i/want.Width, got.V[i], w)
			}
		}
	}
}
