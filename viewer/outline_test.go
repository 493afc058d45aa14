package viewer

import (
	"math"
	"path/filepath"
	"strconv"
	"testing"

	"brightfold/internal/phantom"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	"brightfold/internal/volume/nifti"
)

// A scan that is the template moved by a known whole-voxel translation,
// shown in template space through that alignment: the view is the template
// again, and the outline drawn on an axial plane is exactly the edge of the
// mask's slice as scipy.ndimage computes it (mask less its binary erosion
// with the 4-connected cross; Debian python3-scipy, through nibabel).
func TestTemplateViewOutline(t *testing.T) {
	refcheck.PythonModule(t, "scipy")
	refcheck.PythonModule(t, "nibabel")
	c, err := phantom.Generate(20261203, 0, phantom.Options{VoxelMM: 4})
	if err != nil {
		t.Fatal(err)
	}
	template := c.Volume
	mask := *template
	mask.Data = make([]float32, len(template.Data))
	for i, l := range c.Labels {
		if l != phantom.Air {
			mask.Data[i] = 1
		}
	}
	shift := [3]float64{8, -4, 12} // mm, whole voxels of 4 mm
	move := volume.Diag([3]float64{1, 1, 1}, shift)
	scan := *template
	scan.Affine = move.Mul(template.Affine)
	view, err := NewTemplateView(&scan, template, &mask, move)
	if err != nil {
		t.Fatal(err)
	}
	got := view.Scene.Volume()
	if got.Dims != template.Dims {
		t.Fatalf("view grid %v, template %v", got.Dims, template.Dims)
	}
	worst := 0.0
	for i, x := range template.Data {
		worst = math.Max(worst, math.Abs(float64(got.Data[i]-x)))
	}
	if worst > 1e-3 {
		t.Errorf("the aligned scan differs from the template by up to %g", worst)
	}
	if p := view.ToScan.Apply([3]float64{0, 0, 0}); p != shift {
		t.Errorf("view origin goes to scan %v, want %v", p, shift)
	}

	dir := t.TempDir()
	maskFile := filepath.Join(dir, "mask.nii")
	if err := nifti.Write(maskFile, &mask, nifti.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	s := view.Scene
	f := s.Frame(Axial, s.Center(), Radiological, 0)
	edges := OutlineEdges(f, view.Outline)
	var ref struct{ Edges [][2]int }
	refcheck.RunPython(t, filepath.Join("testdata", "outline_ref.py"), &ref, maskFile, strconv.Itoa(f.Slice))
	want := map[[2]int]bool{}
	for _, e := range ref.Edges {
		want[e] = true
	}
	if len(want) < 20 {
		t.Fatalf("reference outline has only %d voxels", len(want))
	}
	found := map[[2]int]bool{}
	for y := 0; y < f.Height; y++ {
		for x := 0; x < f.Width; x++ {
			v, inside := f.VoxelAt(float64(x)+0.5, float64(y)+0.5)
			if !inside {
				if edges[y*f.Width+x] {
					t.Fatalf("outline pixel (%d, %d) outside the volume", x, y)
				}
				continue
			}
			ij := [2]int{v[0], v[1]}
			if edges[y*f.Width+x] != want[ij] {
				t.Errorf("pixel (%d, %d) = voxel %v: outline %v, scipy edge %v", x, y, ij, edges[y*f.Width+x], want[ij])
			}
			if edges[y*f.Width+x] {
				found[ij] = true
			}
		}
	}
	if len(found) != len(want) {
		t.Errorf("outline covers %d voxels of the slice, scipy's edge %d", len(found), len(want))
	}
	// Rendered, the outline's pixels carry its colour over the scan.
	img, err := s.Render(f, Layers{Window: s.DefaultWindow(), Outline: view.Outline})
	if err != nil {
		t.Fatal(err)
	}
	for i, e := range edges {
		if e && img.RGBAAt(i%f.Width, i/f.Width) != view.Outline.Color {
			t.Fatalf("outline pixel %d not drawn in the outline colour", i)
		}
	}
}
