package dicom

import (
	"encoding/binary"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/inputerr"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

// Reference files installed by Debian's python3-pydicom 2.3.1 and
// python3-nibabel 5.0.
const (
	dcmPydicomDir = "/usr/lib/python3/dist-packages/pydicom/data/test_files"
	dcmNibabelDir = "/usr/lib/python3/dist-packages/nibabel/tests/data"
	dcmNicomDir   = "/usr/lib/python3/dist-packages/nibabel/nicom/tests/data"
)

type dcmPixelRef struct {
	File   string `json:"file"`
	OK     bool   `json:"ok"`
	Error  string `json:"error"`
	Shape  []int  `json:"shape"`
	Values string `json:"values"` // file of little-endian float64 values, row by row
}

// dcmRefValues reads the float64 values the reference script wrote.
func dcmRefValues(t *testing.T, path string) []float64 {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	out := make([]float64, len(b)/8)
	for i := range out {
		out[i] = math.Float64frombits(binary.LittleEndian.Uint64(b[8*i:]))
	}
	return out
}

// dcmReadable are the uncompressed grey-scale single-frame images among the
// reference files: every one must decode to pydicom's values. "geometry"
// marks those with an Image Plane module, which Load must also read.
var dcmReadable = []struct {
	path     string
	geometry bool
}{
	{dcmPydicomDir + "/CT_small.dcm", true},           // explicit VR LE, int16, rescale -1024
	{dcmPydicomDir + "/MR_small.dcm", true},           // explicit VR LE, int16
	{dcmPydicomDir + "/MR_small_bigendian.dcm", true}, // explicit VR big endian
	{dcmPydicomDir + "/MR_small_expb.dcm", true},      // explicit VR big endian
	{dcmPydicomDir + "/MR_small_implicit.dcm", true},  // implicit VR LE
	{dcmPydicomDir + "/MR_small_padded.dcm", true},    // pixel data with excess padding
	{dcmPydicomDir + "/rtdose_1frame.dcm", true},      // uint32, implicit VR
	{dcmPydicomDir + "/rtdose_expb_1frame.dcm", true}, // uint32, big endian
	{dcmPydicomDir + "/image_dfl.dcm", false},         // deflated explicit VR LE, uint8
	{dcmPydicomDir + "/MR_small_RLE.dcm", true},       // RLE Lossless (PS3.5 Annex G), int16
	{dcmPydicomDir + "/rtdose_rle_1frame.dcm", false}, // RLE Lossless, uint32 (no position: geometry refused)
	// 1 bit, functional groups; Load refuses these (TestDICOMReferenceErrors):
	// they keep 3 per-frame functional group items for their 1 frame.
	{dcmPydicomDir + "/liver_1frame.dcm", false},
	{dcmPydicomDir + "/liver_expb_1frame.dcm", false}, // big endian
	{dcmNibabelDir + "/0.dcm", true},                  // uint16, 12 bits stored
	{dcmNibabelDir + "/1.dcm", true},                  // uint16, 12 bits stored
	{dcmNicomDir + "/decimal_rescale.dcm", true},      // RescaleSlope 2, intercept -4096
}

// dcmDecodeFile reads one file's header and its first frame's pixels the way
// loading does, without the series geometry.
func dcmDecodeFile(path string) ([]float32, *dcmFile, error) {
	f, err := readHeaderFile(path)
	if err != nil {
		return nil, nil, err
	}
	if f.err != nil && !errors.Is(f.err, errGeometry) {
		return nil, f, f.err
	}
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, f, err
	}
	raw, err := readPixelBytes(f, data)
	if err != nil {
		return nil, f, err
	}
	fr := dcmFrame{file: f, slope: f.slope, intercept: f.intercept}
	if len(f.frameGeo) > 0 {
		fr = f.frameGeo[0]
	}
	out := make([]float32, f.rows*f.cols)
	f.decodeFrame(raw, fr, out)
	return out, f, nil
}

// TestDICOMPixelsMatchPydicom: pixel values after RescaleSlope/Intercept
// (DICOM PS3.3 C.11.1.1.2) equal pydicom 2.3.1's pixel_array passed through
// apply_modality_lut, for every readable reference image; and Load gives
// the same values for those with geometry.
func TestDICOMPixelsMatchPydicom(t *testing.T) {
	refcheck.PythonModule(t, "pydicom")
	var paths []string
	for _, r := range dcmReadable {
		paths = append(paths, refcheck.Path(t, r.path))
	}
	var refs []dcmPixelRef
	refcheck.RunPython(t, dicomRef, &refs, append([]string{"pixels", t.TempDir()}, paths...)...)
	for i, r := range dcmReadable {
		ref := refs[i]
		name := filepath.Base(r.path)
		if !ref.OK {
			t.Errorf("%s: pydicom could not read it: %s", name, ref.Error)
			continue
		}
		got, f, err := dcmDecodeFile(r.path)
		if err != nil {
			t.Errorf("%s: %v", name, err)
			continue
		}
		if len(ref.Shape) != 2 || ref.Shape[0] != f.rows || ref.Shape[1] != f.cols {
			t.Errorf("%s: rows×cols %d×%d, pydicom shape %v", name, f.rows, f.cols, ref.Shape)
			continue
		}
		want := dcmRefValues(t, ref.Values)
		dcmCompareValues(t, name, got, want)
		if !r.geometry {
			continue
		}
		v, err := volume.Load([]string{r.path}, volume.LoadOptions{})
		if err != nil {
			t.Errorf("%s: Load: %v", name, err)
			continue
		}
		if v.Dims != [3]int{f.cols, f.rows, 1} {
			t.Errorf("%s: Load dims %v", name, v.Dims)
			continue
		}
		dcmCompareValues(t, name+" (Load)", v.Data, want)
	}
}

func dcmCompareValues(t *testing.T, name string, got []float32, want []float64) {
	t.Helper()
	if len(got) != len(want) {
		t.Errorf("%s: %d values, pydicom %d", name, len(got), len(want))
		return
	}
	for p := range got {
		// float32 holds these values exactly (|v| < 2^24, or a float32 rounding of pydicom's float64).
		if w := want[p]; float64(got[p]) != float64(float32(w)) {
			t.Errorf("%s: pixel %d (row %d) = %v, pydicom %v", name, p, p, got[p], w)
			return
		}
	}
}

// TestDICOMReferenceErrors: files we do not decode give one clear line
// naming the file and, for compressed ones, the transfer syntax UID and name
// (DICOM PS3.5 Annex A; names from PS3.6 Annex A).
func TestDICOMReferenceErrors(t *testing.T) {
	cases := []struct{ file, want string }{
		{"MR_truncated.dcm", "truncated"},
		{"JPEG-lossy.dcm", "1.2.840.10008.1.2.4.51 JPEG Extended"},
		{"JPGExtended.dcm", "1.2.840.10008.1.2.4.51 JPEG Extended"},
		{"SC_rgb_jpeg.dcm", "1.2.840.10008.1.2.4.50 JPEG Baseline"},
		{"SC_rgb_jpeg_gdcm.dcm", "colour"}, // JPEG Lossless is read, colour is not
		{"JPEG2000.dcm", "1.2.840.10008.1.2.4.91 JPEG 2000"},
		{"MR_small_jp2klossless.dcm", "1.2.840.10008.1.2.4.90 JPEG 2000"},
		{"SC_rgb_rle_16bit.dcm", "colour"},
		{"693_J2KI.dcm", "1.2.840.10008.1.2.4.91"},
		{"SC_rgb_small_odd.dcm", "colour"},
		{"SC_ybr_full_422_uncompressed.dcm", "colour"},
		{"ExplVR_BigEnd.dcm", "colour"},
		{"rtplan.dcm", "without pixel data"},
		{"test-SR.dcm", "without pixel data"},
		{"meta_missing_tsyntax.dcm", "TransferSyntaxUID"},
		{"no_meta.dcm", "DICM"},
		{"liver_1frame.dcm", "3 items for 1 frames"},
		{"rtdose.dcm", ""}, // multi-frame with GridFrameOffsetVector: loads
	}
	for _, c := range cases {
		p := refcheck.Path(t, filepath.Join(dcmPydicomDir, c.file))
		v, err := volume.Load([]string{p}, volume.LoadOptions{})
		if c.want == "" {
			if err != nil {
				t.Errorf("%s: %v", c.file, err)
			} else if v.Dims[2] < 2 {
				t.Errorf("%s: dims %v", c.file, v.Dims)
			}
			continue
		}
		dcmCheckInputError(t, c.file, p, err, c.want)
	}
}

// dcmCheckInputError wants a one-line input error naming path and containing want.
func dcmCheckInputError(t *testing.T, name, path string, err error, want string) {
	t.Helper()
	if err == nil {
		t.Errorf("%s: no error, want one containing %q", name, want)
		return
	}
	msg := err.Error()
	if !inputerr.Is(err) || !strings.HasPrefix(msg, path) || strings.Contains(msg, "\n") ||
		!strings.Contains(strings.ToLower(msg), strings.ToLower(want)) {
		t.Errorf("%s: error %q (input error %v), want one line starting with %s and containing %q",
			name, msg, inputerr.Is(err), path, want)
	}
}
