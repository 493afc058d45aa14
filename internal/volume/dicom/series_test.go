package dicom

import (
	"bytes"
	"fmt"
	"math"
	"math/rand"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"

	"brightfold/internal/atomicfile"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

// dcmShuffle renames the files of a written series into a nested folder in
// an order unrelated to their slice order, so that only the geometry can
// sort them.
func dcmShuffle(t testing.TB, dir string, seed int64) string {
	t.Helper()
	files := dcmSeriesFiles(t, dir)
	out := filepath.Join(t.TempDir(), "export", "nested")
	if err := os.MkdirAll(out, 0o755); err != nil {
		t.Fatal(err)
	}
	perm := rand.New(rand.NewSource(seed)).Perm(len(files))
	for i, f := range files {
		dst := filepath.Join(out, fmt.Sprintf("img_%03d", perm[i]))
		if err := os.Rename(f, dst); err != nil {
			t.Fatal(err)
		}
	}
	return filepath.Dir(out)
}

func dcmAffineClose(a, b volume.Affine, tol float64) bool {
	for r := 0; r < 4; r++ {
		for c := 0; c < 4; c++ {
			if math.Abs(a[r][c]-b[r][c]) > tol {
				return false
			}
		}
	}
	return true
}

func dcmAffineFromRows(rows [][]float64) volume.Affine {
	var a volume.Affine
	for r := 0; r < 4; r++ {
		copy(a[r][:], rows[r])
	}
	return a
}

// TestDICOMObliqueSeriesShuffled: an oblique series written in shuffled
// file order (in a nested folder) loads with the affine of DICOM PS3.3
// C.7.6.2.1.1 (computed in Python from pydicom's values), the affine of
// nibabel.nicom's wrapper, and the voxels that were written.
func TestDICOMObliqueSeriesShuffled(t *testing.T) {
	refcheck.PythonModule(t, "nibabel.nicom.dicomwrappers")
	src := dcmObliqueVolume(t, [3]int{7, 5, 9}, true)
	dir := t.TempDir()
	if err := WriteSeries(dir, src, dcmDemoOptions("HMRU-0005/T1")); err != nil {
		t.Fatal(err)
	}
	root := dcmShuffle(t, dir, 5)
	v, err := volume.Load([]string{root}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var files []string
	for _, s := range mustList(t, root) {
		files = append(files, s.Files...)
	}
	var ref struct {
		Formula [][]float64 `json:"formula_lps"`
		Nibabel [][]float64 `json:"affine_lps_rcs"`
		Sum     float64     `json:"sum"`
	}
	refcheck.RunPython(t, dicomRef, &ref, append([]string{"series"}, files...)...)
	// PS3.3 C.7.6.2.1.1 gives LPS; RAS negates the first two rows.
	formula := dcmAffineFromRows(ref.Formula)
	for c := 0; c < 4; c++ {
		formula[0][c], formula[1][c] = -formula[0][c], -formula[1][c]
	}
	if !dcmAffineClose(v.Affine, formula, 1e-6) {
		t.Errorf("affine\n%v\nPS3.3 formula (RAS)\n%v", v.Affine, formula)
	}
	if nib := dcmAffineFromNibabel(ref.Nibabel, v.Dims[2]); !dcmAffineClose(v.Affine, nib, 1e-6) {
		t.Errorf("affine\n%v\nnibabel.nicom (converted)\n%v", v.Affine, nib)
	}
	if !dcmAffineClose(v.Affine, src.Affine, 1e-6) {
		t.Errorf("affine\n%v\nwritten\n%v", v.Affine, src.Affine)
	}
	var sum float64
	for i, x := range v.Data {
		if x != src.Data[i] {
			t.Fatalf("voxel %d = %v, written %v", i, x, src.Data[i])
		}
		sum += float64(x)
	}
	if sum != ref.Sum {
		t.Errorf("voxel sum %v, pydicom stack %v", sum, ref.Sum)
	}
}

func mustList(t testing.TB, paths ...string) []SeriesInfo {
	t.Helper()
	s, err := ListSeries(paths)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// TestDICOMRoundTrip: WriteSeries then Load gives back the affine and
// the voxels (exactly for integers, within half a rescale step otherwise),
// the metadata and the identifiers.
func TestDICOMRoundTrip(t *testing.T) {
	for _, integer := range []bool{true, false} {
		src := dcmObliqueVolume(t, [3]int{8, 6, 5}, integer)
		dir := t.TempDir()
		opts := dcmDemoOptions("HMRU-0006/T1")
		opts.WindowCenter, opts.WindowWidth = 300, 800
		if err := WriteSeries(dir, src, opts); err != nil {
			t.Fatal(err)
		}
		v, err := volume.Load(dcmSeriesFiles(t, dir), volume.LoadOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if v.Dims != src.Dims || !dcmAffineClose(v.Affine, src.Affine, 1e-9) {
			t.Fatalf("dims %v affine\n%v\nwant %v\n%v", v.Dims, v.Affine, src.Dims, src.Affine)
		}
		lo, hi := math.Inf(1), math.Inf(-1)
		for _, x := range src.Data {
			lo, hi = math.Min(lo, float64(x)), math.Max(hi, float64(x))
		}
		tol := 0.0
		if !integer {
			tol = (hi-lo)/65535/2 + 1e-4*math.Max(math.Abs(lo), math.Abs(hi))
		}
		for i, x := range v.Data {
			if math.Abs(float64(x)-float64(src.Data[i])) > tol {
				t.Fatalf("integer=%v voxel %d = %v, wrote %v (tolerance %g)", integer, i, x, src.Data[i], tol)
			}
		}
		m := v.Meta
		if m.Format != "dicom" || m.Modality != "MR" || m.SeriesDescription != opts.SeriesDescription ||
			m.Manufacturer != opts.Manufacturer || m.FieldStrengthT != 3 || m.RepetitionTimeMs != 2300 ||
			m.EchoTimeMs != 2.98 || m.InversionTimeMs != 900 || m.FlipAngleDeg != 9 ||
			m.SliceThicknessMm != 1.7 || m.WindowCenter != 300 || m.WindowWidth != 800 ||
			m.SeriesUID != DeriveUID(opts.Seed, "series") || m.Site != "" {
			t.Errorf("metadata %+v", m)
		}
		p := v.Patient
		if p.Name != "DEMO^SUBJECT0001" || p.ID != "HMRU-0001" || p.StudyDate != "20260115" ||
			p.Institution != opts.InstitutionName {
			t.Errorf("identifiers not read back")
		}
		if len(v.Warnings) != 0 {
			t.Errorf("warnings %v", v.Warnings)
		}
	}
}

// TestListSeriesSplits: two series in one folder are listed; a series that
// mixes two orientations under one SeriesInstanceUID is split; Load without
// a choice lists them, and with a key loads that one.
func TestListSeriesSplits(t *testing.T) {
	root := t.TempDir()
	a := dcmObliqueVolume(t, [3]int{4, 4, 3}, true)
	b := dcmObliqueVolume(t, [3]int{5, 3, 4}, true)
	optsA, optsB := dcmDemoOptions("HMRU-0007/T1"), dcmDemoOptions("HMRU-0007/T2")
	optsB.SeriesNumber, optsB.SeriesDescription = 2, "T2 phantom"
	if err := WriteSeries(filepath.Join(root, "a"), a, optsA); err != nil {
		t.Fatal(err)
	}
	if err := WriteSeries(filepath.Join(root, "b"), b, optsB); err != nil {
		t.Fatal(err)
	}
	list := mustList(t, root)
	if len(list) != 2 || list[0].Slices != 3 || list[1].Slices != 4 || list[1].Rows != 3 || list[1].Cols != 5 ||
		list[1].Description != "T2 phantom" || len(list[0].Files) != 3 || list[0].Plane == "" || list[0].Orientation == "" {
		t.Fatalf("list %+v", list)
	}
	_, err := volume.Load([]string{root}, volume.LoadOptions{})
	dcmCheckInputError(t, "two series", root, err, "2 series found")
	v, err := volume.Load([]string{root}, volume.LoadOptions{SeriesUID: list[1].UID})
	if err != nil || v.Dims != b.Dims {
		t.Fatalf("load by UID: %v", err)
	}
	_, err = volume.Load([]string{root}, volume.LoadOptions{SeriesUID: "1.2.3"})
	dcmCheckInputError(t, "unknown series", root, err, `no series "1.2.3"`)

	// Same UID, a second orientation: write b with a's seed into a's folder.
	mixed := b.Clone()
	mixed.Affine = volume.Diag([3]float64{1, 1, 2}, [3]float64{0, 0, 100})
	optsMixed := optsA
	if err := WriteSeries(filepath.Join(root, "a", "axial"), mixed, optsMixed); err != nil {
		t.Fatal(err)
	}
	list = mustList(t, filepath.Join(root, "a"))
	if len(list) != 2 || list[0].UID != list[1].UID || list[0].Key == list[1].Key || !strings.HasPrefix(list[0].Key, list[0].UID+"/") {
		t.Fatalf("split list %+v", list)
	}
	_, err = volume.Load([]string{filepath.Join(root, "a")}, volume.LoadOptions{SeriesUID: list[0].UID})
	dcmCheckInputError(t, "split series by UID", filepath.Join(root, "a"), err, "was split")
	for _, s := range list {
		if _, err := volume.Load([]string{filepath.Join(root, "a")}, volume.LoadOptions{SeriesUID: s.Key}); err != nil {
			t.Errorf("load %s: %v", s.Key, err)
		}
	}
}

// dcmWriteEnhanced writes v as one Enhanced MR Image Storage file
// (1.2.840.10008.5.1.4.1.1.4.1) with Shared and Per-frame Functional Groups
// (DICOM PS3.3 C.7.6.16): orientation and pixel measures shared, one plane
// position and pixel value transformation per frame. Frames are stored in
// reverse slice order, indexed by StackID and InStackPositionNumber.
func dcmWriteEnhanced(t testing.TB, path string, v *volume.Volume, slope, intercept float64) {
	t.Helper()
	geo, err := lpsGeometry(v.Affine)
	if err != nil {
		t.Fatal(err)
	}
	n := v.Dims[2]
	nx, ny := v.Dims[0], v.Dims[1]
	e := func(tg tag.Tag, val any) *dicom.Element {
		el, err := dicom.NewElement(tg, val)
		if err != nil {
			t.Fatalf("%v: %v", tg, err)
		}
		return el
	}
	f := func(x float64) string { return strconv.FormatFloat(x, 'g', 12, 64) }
	var perFrame [][]*dicom.Element
	pix := make([]byte, 0, 2*nx*ny*n)
	for s := 0; s < n; s++ {
		k := n - 1 - s
		pos := geo.origin.add(geo.sliceStep.scale(float64(k)))
		perFrame = append(perFrame, []*dicom.Element{
			e(tag.FrameContentSequence, [][]*dicom.Element{{
				e(tag.StackID, []string{"1"}),
				e(tag.InStackPositionNumber, []int{s + 1}),
				e(tag.DimensionIndexValues, []int{1, s + 1}),
			}}),
			e(tag.PlanePositionSequence, [][]*dicom.Element{{e(tag.ImagePositionPatient, []string{f(pos[0]), f(pos[1]), f(pos[2])})}}),
			e(tag.PixelValueTransformationSequence, [][]*dicom.Element{{
				e(tag.RescaleIntercept, []string{f(intercept)}), e(tag.RescaleSlope, []string{f(slope)}), e(tag.RescaleType, []string{"US"}),
			}}),
		})
		for p := 0; p < nx*ny; p++ {
			stored := uint16(int16(math.Round((float64(v.Data[k*nx*ny+p]) - intercept) / slope)))
			pix = append(pix, byte(stored), byte(stored>>8))
		}
	}
	r, c := geo.rowDir, geo.colDir
	shared := [][]*dicom.Element{{
		e(tag.PixelMeasuresSequence, [][]*dicom.Element{{
			e(tag.SliceThickness, []string{f(geo.sliceStep.norm())}),
			e(tag.PixelSpacing, []string{f(geo.pixelSpacing[0]), f(geo.pixelSpacing[1])}),
		}}),
		e(tag.PlaneOrientationSequence, [][]*dicom.Element{{
			e(tag.ImageOrientationPatient, []string{f(r[0]), f(r[1]), f(r[2]), f(c[0]), f(c[1]), f(c[2])}),
		}}),
	}}
	sop := DeriveUID(path, "enhanced")
	els := []*dicom.Element{
		e(tag.FileMetaInformationVersion, []byte{0, 1}),
		e(tag.MediaStorageSOPClassUID, []string{"1.2.840.10008.5.1.4.1.1.4.1"}),
		e(tag.MediaStorageSOPInstanceUID, []string{sop}),
		e(tag.TransferSyntaxUID, []string{explicitVRLittleEndian}),
		e(tag.SOPClassUID, []string{"1.2.840.10008.5.1.4.1.1.4.1"}),
		e(tag.SOPInstanceUID, []string{sop}),
		e(tag.Modality, []string{"MR"}),
		e(tag.SeriesInstanceUID, []string{DeriveUID(path, "series")}),
		e(tag.DimensionIndexSequence, [][]*dicom.Element{
			{e(tag.DimensionIndexPointer, []int{0x0020, 0x9056})},
			{e(tag.DimensionIndexPointer, []int{0x0020, 0x9057})},
		}),
		e(tag.SamplesPerPixel, []int{1}),
		e(tag.PhotometricInterpretation, []string{"MONOCHROME2"}),
		e(tag.NumberOfFrames, []string{strconv.Itoa(n)}),
		e(tag.Rows, []int{ny}),
		e(tag.Columns, []int{nx}),
		e(tag.BitsAllocated, []int{16}),
		e(tag.BitsStored, []int{16}),
		e(tag.HighBit, []int{15}),
		e(tag.PixelRepresentation, []int{1}),
		e(tag.SharedFunctionalGroupsSequence, shared),
		e(tag.PerFrameFunctionalGroupsSequence, perFrame),
		e(tag.PixelData, dicom.PixelDataInfo{IntentionallyUnprocessed: true, UnprocessedValueData: pix}),
	}
	var buf bytes.Buffer
	if err := dicom.Write(&buf, dicom.Dataset{Elements: els}); err != nil {
		t.Fatal(err)
	}
	if err := atomicfile.WriteBytes(path, buf.Bytes()); err != nil {
		t.Fatal(err)
	}
}

// TestDICOMMultiframeNibabel: an Enhanced MR multi-frame file with
// per-frame geometry (PS3.3 C.7.6.16) loads with the written geometry and
// voxels, and with the affine and data of nibabel.nicom's MultiframeWrapper.
func TestDICOMMultiframeNibabel(t *testing.T) {
	refcheck.PythonModule(t, "nibabel.nicom.dicomwrappers")
	src := dcmObliqueVolume(t, [3]int{6, 5, 4}, true)
	path := filepath.Join(t.TempDir(), "enhanced.dcm")
	dcmWriteEnhanced(t, path, src, 2, -100)
	v, err := volume.Load([]string{path}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if v.Dims != src.Dims || !dcmAffineClose(v.Affine, src.Affine, 1e-6) {
		t.Fatalf("dims %v affine\n%v\nwant\n%v", v.Dims, v.Affine, src.Affine)
	}
	for i, x := range v.Data {
		want := math.Round((float64(src.Data[i])+100)/2)*2 - 100
		if float64(x) != want {
			t.Fatalf("voxel %d = %v, want %v", i, x, want)
		}
	}
	var ref struct {
		Class  string      `json:"class"`
		Affine [][]float64 `json:"affine_lps_rcs"`
		Shape  []int       `json:"shape_rcs"`
		Sum    float64     `json:"sum"`
	}
	refcheck.RunPython(t, dicomRef, &ref, "multiframe", path)
	if ref.Class != "MultiframeWrapper" {
		t.Fatalf("nibabel used %s", ref.Class)
	}
	// nibabel's frame 0 is the first stored frame, our last slice; its slice
	// axis is the column × row cosine, ours row × column.
	if nib := dcmAffineFromNibabel(ref.Affine, v.Dims[2]); !dcmAffineClose(v.Affine, nib, 1e-6) {
		t.Errorf("affine\n%v\nnibabel MultiframeWrapper (converted)\n%v", v.Affine, nib)
	}
	var sum float64
	for _, x := range v.Data {
		sum += float64(x)
	}
	if sum != ref.Sum {
		t.Errorf("voxel sum %v, nibabel %v", sum, ref.Sum)
	}
}

// TestDICOMWarnings: conditions that leave the volume right but deserve a
// note load with a warning: a gantry-tilt shear (kept in the affine, as the
// positions give it), slice spacing uneven by less than 5%, a file copied
// twice, MONOCHROME1 (PS3.3 C.7.6.3.1.2: minimum shown white).
func TestDICOMWarnings(t *testing.T) {
	t.Run("shear", func(t *testing.T) {
		src := dcmObliqueVolume(t, [3]int{4, 4, 5}, true)
		src.Affine[0][2] += 0.3 // tilt the slice axis by about 10°
		dir := t.TempDir()
		if err := WriteSeries(dir, src, dcmDemoOptions("warn/shear")); err != nil {
			t.Fatal(err)
		}
		v := dcmLoadWarned(t, dir, "sheared")
		if !dcmAffineClose(v.Affine, src.Affine, 1e-6) {
			t.Errorf("affine\n%v\nwritten\n%v", v.Affine, src.Affine)
		}
	})
	t.Run("uneven", func(t *testing.T) {
		dir := t.TempDir()
		dcmMoveSlice(2, 2.02, 0)(t, dir)
		dcmLoadWarned(t, dir, "slice spacing varies")
	})
	t.Run("copied file", func(t *testing.T) {
		dir := t.TempDir()
		files := dcmSmallSeries(t, dir, 3)
		b, _ := os.ReadFile(files[1])
		if err := os.WriteFile(filepath.Join(dir, "copy of IM0002.dcm"), b, 0o644); err != nil {
			t.Fatal(err)
		}
		if v := dcmLoadWarned(t, dir, "duplicate copies"); v.Dims[2] != 3 {
			t.Errorf("dims %v", v.Dims)
		}
	})
	t.Run("MONOCHROME1", func(t *testing.T) {
		dir := t.TempDir()
		files := dcmSmallSeries(t, dir, 2)
		for _, f := range files {
			dcmRewrite(t, f, dcmSet(t, tag.PhotometricInterpretation, []string{"MONOCHROME1"}))
		}
		dcmLoadWarned(t, dir, "MONOCHROME1")
	})
}

func dcmLoadWarned(t *testing.T, dir, want string) *volume.Volume {
	t.Helper()
	v, err := volume.Load([]string{dir}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	for _, w := range v.Warnings {
		if strings.Contains(w, want) {
			return v
		}
	}
	t.Errorf("warnings %q, want one containing %q", v.Warnings, want)
	return v
}
