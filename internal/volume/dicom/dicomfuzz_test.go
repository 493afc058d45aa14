package dicom

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/inputerr"
	"brightfold/internal/volume"
)

// FuzzDICOMSeries assembles a three-slice series whose middle file is the
// fuzzed bytes (the other two are valid slices written by WriteSeries),
// and loads the file alone: never a panic or internal error, only one-line
// input errors, and any volume that loads is consistent.
func FuzzDICOMSeries(f *testing.F) {
	dir := f.TempDir()
	files := dcmSmallSeries(f, dir, 3)
	middle, err := os.ReadFile(files[1])
	if err != nil {
		f.Fatal(err)
	}
	f.Add(middle)
	f.Add(dcmRawFile(tsImplicitLE, nil))
	f.Add(dcmRawFile(tsExplicitBE, dcmRawElem(0x0008, 0x1115, "SQ", nil)))
	// Small seeds from Debian's python3-pydicom test files, when installed:
	// big endian, deflated, multi-frame with grid offsets, RLE Lossless, JPEG-LS.
	for _, name := range []string{"MR_small_bigendian.dcm", "image_dfl.dcm", "rtdose.dcm", "MR_small_RLE.dcm", "MR_small_jpeg_ls_lossless.dcm"} {
		if b, err := os.ReadFile(filepath.Join(dcmPydicomDir, name)); err == nil {
			f.Add(b)
		}
	}
	// Each fuzzing process runs one input at a time: the middle slice is
	// overwritten in place, the two valid neighbours stay.
	target := files[1]
	f.Fuzz(func(t *testing.T, data []byte) {
		if err := os.WriteFile(target, data, 0o644); err != nil {
			t.Fatal(err)
		}
		fuzzCheckLoad(t, []string{dir})
		fuzzCheckLoad(t, []string{target})
		if list, err := ListSeries([]string{dir}); err == nil {
			for _, s := range list {
				if strings.ContainsAny(s.Key+s.Description+s.Problem, "\n\r") {
					t.Errorf("series listing with a line break: %+v", s)
				}
			}
		}
	})
}

func fuzzCheckLoad(t *testing.T, paths []string) {
	v, err := volume.Load(paths, volume.LoadOptions{})
	if err != nil {
		if !inputerr.Is(err) || strings.ContainsAny(err.Error(), "\n\r") || strings.Contains(err.Error(), "internal error") {
			t.Fatalf("error is not one input-error line: %q", err)
		}
		return
	}
	if len(v.Data) != v.Len() || v.Affine.Validate() != nil {
		t.Fatalf("inconsistent volume: dims %v, %d voxels, affine %v", v.Dims, len(v.Data), v.Affine)
	}
}
