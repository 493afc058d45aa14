package dicom

import (
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"

	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

// A series in which every slice position holds two images (two volumes of
// one series, as a time series is often stored) is split into two volumes
// like a 4D NIfTI, not refused as "two slices at the same position": the
// slice means of each loaded volume equal those pydicom reads from the
// files grouped by position and ordered by InstanceNumber (the reference);
// NumVolumes is 2 and a warning says which volume was loaded.
func TestMultiVolumeSeries(t *testing.T) {
	refcheck.PythonModule(t, "pydicom")
	dir := t.TempDir()
	const n = 5
	a := dcmObliqueVolume(t, [3]int{4, 4, n}, true)
	b := dcmObliqueVolume(t, [3]int{4, 4, n}, true)
	for i := range b.Data {
		b.Data[i] = float32(int(b.Data[i])/2 + 7) // another volume on the same grid
	}
	opts := dcmDemoOptions("multi/volume")
	if err := WriteSeries(filepath.Join(dir, "a"), a, opts); err != nil {
		t.Fatal(err)
	}
	if err := WriteSeries(filepath.Join(dir, "b"), b, opts); err != nil {
		t.Fatal(err)
	}
	all := filepath.Join(dir, "all")
	if err := os.Mkdir(all, 0o755); err != nil {
		t.Fatal(err)
	}
	for v, sub := range []string{"a", "b"} {
		for i, f := range dcmSeriesFiles(t, filepath.Join(dir, sub)) {
			dst := filepath.Join(all, sub+filepath.Base(f))
			raw, err := os.ReadFile(f)
			if err != nil {
				t.Fatal(err)
			}
			if err := os.WriteFile(dst, raw, 0o644); err != nil {
				t.Fatal(err)
			}
			if v == 1 { // the second volume: its own SOP Instance UIDs, later instance numbers
				ds, err := dicom.ParseFile(dst, nil, dicom.SkipPixelData())
				if err != nil {
					t.Fatal(err)
				}
				sop, _ := ds.FindElementByTag(tag.SOPInstanceUID)
				uid := dicom.MustGetStrings(sop.Value)[0] + ".2"
				dcmRewrite(t, dst, dcmSet(t, tag.SOPInstanceUID, []string{uid}))
				dcmRewrite(t, dst, dcmSet(t, tag.InstanceNumber, []string{strconv.Itoa(n + 1 + i)}))
			}
		}
	}
	var ref struct{ Volumes [][]float64 }
	refcheck.RunPython(t, "testdata/multivolume_ref.py", &ref, all)
	if len(ref.Volumes) != 2 {
		t.Fatalf("pydicom groups the files into %d volumes, want 2", len(ref.Volumes))
	}
	for k := 0; k < 2; k++ {
		v, err := loadDICOM([]string{all}, volume.LoadOptions{VolumeIndex: k})
		if err != nil {
			t.Fatalf("volume %d: %v", k, err)
		}
		if v.Meta.NumVolumes != 2 || v.Dims[2] != n || !strings.Contains(strings.Join(v.Warnings, " "), "2 volumes") {
			t.Errorf("volume %d: %d volumes, dims %v, warnings %q", k, v.Meta.NumVolumes, v.Dims, v.Warnings)
		}
		for z := 0; z < n; z++ {
			var s float64
			for j := 0; j < 4; j++ {
				for i := 0; i < 4; i++ {
					s += float64(v.Data[v.Index(i, j, z)])
				}
			}
			if got, want := s/16, ref.Volumes[k][z]; math.Abs(got-want) > 1e-4*math.Max(1, math.Abs(want)) {
				t.Errorf("volume %d slice %d: mean %v, pydicom %v", k, z, got, want)
			}
		}
	}
	if _, err := loadDICOM([]string{all}, volume.LoadOptions{VolumeIndex: 2}); err == nil || !strings.Contains(err.Error(), "holds 2") {
		t.Errorf("volume 2 of 2: %v", err)
	}
}
