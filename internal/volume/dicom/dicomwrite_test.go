package dicom

import (
	"bytes"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strconv"
	"testing"

	"brightfold/internal/notice"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

const dicomRef = "testdata/dicom_ref.py"

// dcmRotation returns a rotation about x, then y, then z by the given angles (radians).
func dcmRotation(ax, ay, az float64) [3][3]float64 {
	cx, sx := math.Cos(ax), math.Sin(ax)
	cy, sy := math.Cos(ay), math.Sin(ay)
	cz, sz := math.Cos(az), math.Sin(az)
	rx := [3][3]float64{{1, 0, 0}, {0, cx, -sx}, {0, sx, cx}}
	ry := [3][3]float64{{cy, 0, sy}, {0, 1, 0}, {-sy, 0, cy}}
	rz := [3][3]float64{{cz, -sz, 0}, {sz, cz, 0}, {0, 0, 1}}
	mul := func(a, b [3][3]float64) [3][3]float64 {
		var c [3][3]float64
		for i := 0; i < 3; i++ {
			for j := 0; j < 3; j++ {
				for k := 0; k < 3; k++ {
					c[i][j] += a[i][k] * b[k][j]
				}
			}
		}
		return c
	}
	return mul(rz, mul(ry, rx))
}

// dcmObliqueVolume is a small oblique volume with distinct spacings and
// integer values (so that a 16-bit round trip is exact).
func dcmObliqueVolume(t testing.TB, dims [3]int, integer bool) *volume.Volume {
	t.Helper()
	r := dcmRotation(0.21, -0.13, 0.37)
	sp := [3]float64{0.9, 1.1, 1.7}
	a := volume.Identity()
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			a[i][j] = r[i][j] * sp[j]
		}
	}
	a[0][3], a[1][3], a[2][3] = -60.5, 22.25, -31.0
	v, err := volume.New(dims, a)
	if err != nil {
		t.Fatal(err)
	}
	for k := 0; k < dims[2]; k++ {
		for j := 0; j < dims[1]; j++ {
			for i := 0; i < dims[0]; i++ {
				x := float64(i*7+j*13+k*101) - 40
				if !integer {
					x = x*0.37 + 0.001*float64(i*j)
				}
				v.Data[v.Index(i, j, k)] = float32(x)
			}
		}
	}
	return v
}

func dcmDemoOptions(seed string) WriteOptions {
	return WriteOptions{
		Seed:              seed,
		PatientName:       "DEMO^SUBJECT0001",
		PatientID:         "HMRU-0001",
		StudyDate:         "20260115",
		Modality:          "MR",
		Manufacturer:      "Brightfold Phantom",
		InstitutionName:   "Harbourside Memory Research Unit",
		SeriesDescription: "T1 3D phantom",
		FieldStrengthT:    3,
		RepetitionTimeMs:  2300,
		EchoTimeMs:        2.98,
		InversionTimeMs:   900,
		FlipAngleDeg:      9,
	}
}

func dcmSeriesFiles(t testing.TB, dir string) []string {
	t.Helper()
	files, err := filepath.Glob(filepath.Join(dir, "*.dcm"))
	if err != nil || len(files) == 0 {
		t.Fatalf("no files written in %s: %v", dir, err)
	}
	sort.Strings(files)
	return files
}

type dcmStrictRef struct {
	File                     string    `json:"file"`
	TransferSyntax           string    `json:"transfer_syntax"`
	SOPClass                 string    `json:"sop_class"`
	MediaSOPClass            string    `json:"media_sop_class"`
	SOPInstance              string    `json:"sop_instance"`
	MediaSOPInstance         string    `json:"media_sop_instance"`
	SeriesUID                string    `json:"series_uid"`
	StudyUID                 string    `json:"study_uid"`
	PatientName              string    `json:"patient_name"`
	PatientID                string    `json:"patient_id"`
	Modality                 string    `json:"modality"`
	Manufacturer             string    `json:"manufacturer"`
	Institution              string    `json:"institution"`
	SeriesDescription        string    `json:"series_description"`
	ImageComments            string    `json:"image_comments"`
	IOP                      []float64 `json:"iop"`
	IPP                      []float64 `json:"ipp"`
	PixelSpacing             []float64 `json:"pixel_spacing"`
	SliceThickness           float64   `json:"slice_thickness"`
	SpacingBetweenSlices     float64   `json:"spacing_between_slices"`
	Values                   []float64 `json:"values"`
	Shape                    []int     `json:"shape"`
	FieldStrengthTeslaValues float64   `json:"field_strength"`
	SOPClassName             string    `json:"sop_class_name"`
	ImageType                []string  `json:"image_type"`
	RescaleType              string    `json:"rescale_type"`
	KVP                      *float64  `json:"kvp"`
	SamplesPerPixel          int       `json:"samples_per_pixel"`
	Photometric              string    `json:"photometric"`
	BitsAllocated            int       `json:"bits_allocated"`
	BitsStored               int       `json:"bits_stored"`
	HighBit                  int       `json:"high_bit"`
	Keywords                 []string  `json:"keywords"`
	Empty                    []string  `json:"empty"`
}

// TestWriteDICOMSeriesPydicom writes an oblique series and reads it back with
// pydicom 2.3 in its strict validation mode (VR values checked, warnings
// raised as errors). Geometry is checked against DICOM PS3.3 C.7.6.2.1.1:
// P(i, j) = S + i·Δc·X + j·Δr·Y with X, Y the row and column direction
// cosines of ImageOrientationPatient, Δc = PixelSpacing[1] (between
// columns), Δr = PixelSpacing[0] (between rows), S = ImagePositionPatient.
func TestWriteDICOMSeriesPydicom(t *testing.T) {
	refcheck.PythonModule(t, "pydicom")
	v := dcmObliqueVolume(t, [3]int{6, 5, 4}, true)
	dir := t.TempDir()
	opts := dcmDemoOptions("HMRU-0001/T1")
	if err := WriteSeries(dir, v, opts); err != nil {
		t.Fatal(err)
	}
	files := dcmSeriesFiles(t, dir)
	if len(files) != v.Dims[2] {
		t.Fatalf("wrote %d files, want %d", len(files), v.Dims[2])
	}
	var refs []dcmStrictRef
	refcheck.RunPython(t, dicomRef, &refs, append([]string{"strict"}, files...)...)
	uids := map[string]bool{}
	for k, r := range refs {
		// PS3.5 A.2 (explicit VR little endian); PS3.4 B.5 (MR Image Storage),
		// named so by pydicom's UID dictionary (PS3.6 Annex A).
		if r.TransferSyntax != "1.2.840.10008.1.2.1" || r.SOPClass != MRImageStorage || r.MediaSOPClass != MRImageStorage ||
			r.SOPClassName != "MR Image Storage" {
			t.Errorf("%s: transfer syntax %s, SOP class %s (%s) / %s", r.File, r.TransferSyntax, r.SOPClass, r.SOPClassName, r.MediaSOPClass)
		}
		if r.SOPInstance != r.MediaSOPInstance || uids[r.SOPInstance] {
			t.Errorf("%s: SOP instance UID %s (meta %s) not unique or not matching", r.File, r.SOPInstance, r.MediaSOPInstance)
		}
		uids[r.SOPInstance] = true
		if r.SeriesUID != refs[0].SeriesUID || r.StudyUID != refs[0].StudyUID || len(r.SeriesUID) > 64 {
			t.Errorf("%s: series/study UID differ across files or too long", r.File)
		}
		if r.PatientName != opts.PatientName || r.PatientID != opts.PatientID || r.Modality != "MR" ||
			r.Manufacturer != opts.Manufacturer || r.Institution != opts.InstitutionName ||
			r.SeriesDescription != opts.SeriesDescription || r.FieldStrengthTeslaValues != 3 {
			t.Errorf("%s: header fields %+v", r.File, r)
		}
		if r.ImageComments != notice.Full {
			t.Errorf("%s: ImageComments %q, want the research-use notice", r.File, r.ImageComments)
		}
		// PS3.3 C.7.6.2.1.1, converting LPS to RAS by negating x and y.
		x := [3]float64{-r.IOP[0], -r.IOP[1], r.IOP[2]}
		y := [3]float64{-r.IOP[3], -r.IOP[4], r.IOP[5]}
		s := [3]float64{-r.IPP[0], -r.IPP[1], r.IPP[2]}
		for row := 0; row < 3; row++ {
			want := v.Affine.Apply([3]float64{0, 0, float64(k)})
			if math.Abs(s[row]-want[row]) > 1e-4 {
				t.Errorf("%s: IPP %v, affine gives %v (RAS)", r.File, s, want)
			}
			if got := x[row] * r.PixelSpacing[1]; math.Abs(got-v.Affine[row][0]) > 1e-5 {
				t.Errorf("%s: row direction × column spacing [%d] = %g, affine %g", r.File, row, got, v.Affine[row][0])
			}
			if got := y[row] * r.PixelSpacing[0]; math.Abs(got-v.Affine[row][1]) > 1e-5 {
				t.Errorf("%s: column direction × row spacing [%d] = %g, affine %g", r.File, row, got, v.Affine[row][1])
			}
		}
		if math.Abs(r.SpacingBetweenSlices-1.7) > 1e-9 || math.Abs(r.SliceThickness-1.7) > 1e-9 {
			t.Errorf("%s: slice spacing %g thickness %g, want 1.7", r.File, r.SpacingBetweenSlices, r.SliceThickness)
		}
		// pydicom's pixel_array is (rows, columns): row j, column i is voxel (i, j, k).
		if len(r.Shape) != 2 || r.Shape[0] != v.Dims[1] || r.Shape[1] != v.Dims[0] {
			t.Fatalf("%s: shape %v", r.File, r.Shape)
		}
		for j := 0; j < v.Dims[1]; j++ {
			for i := 0; i < v.Dims[0]; i++ {
				if got, want := r.Values[j*v.Dims[0]+i], float64(v.At(i, j, k)); got != want {
					t.Fatalf("%s: pixel (%d,%d) = %g, want %g", r.File, i, j, got, want)
				}
			}
		}
	}
}

// TestWriteDICOMSeriesNibabel: nibabel.nicom's wrapper affine of the first
// slice (sorted by its slice indicator) equals our affine, after swapping
// nibabel's (row, column) index order to our (column, row) and LPS to RAS.
func TestWriteDICOMSeriesNibabel(t *testing.T) {
	refcheck.PythonModule(t, "nibabel.nicom.dicomwrappers")
	v := dcmObliqueVolume(t, [3]int{5, 4, 6}, false)
	dir := t.TempDir()
	if err := WriteSeries(dir, v, dcmDemoOptions("HMRU-0002/T1")); err != nil {
		t.Fatal(err)
	}
	var ref struct {
		Files  []string    `json:"files"`
		Affine [][]float64 `json:"affine_lps_rcs"`
		Shape  []int       `json:"shape_rcs"`
		Sum    float64     `json:"sum"`
	}
	refcheck.RunPython(t, dicomRef, &ref, append([]string{"series"}, dcmSeriesFiles(t, dir)...)...)
	got := dcmAffineFromNibabel(ref.Affine, v.Dims[2])
	for r := 0; r < 4; r++ {
		for c := 0; c < 4; c++ {
			if math.Abs(got[r][c]-v.Affine[r][c]) > 1e-4 {
				t.Fatalf("nibabel affine (RAS, column-row order)\n%v\nours\n%v", got, v.Affine)
			}
		}
	}
	var sum float64
	for _, x := range v.Data {
		sum += float64(x)
	}
	// Non-integer data is quantised to 16 bits: allow half a step per voxel.
	if math.Abs(sum-ref.Sum) > 0.01*float64(len(v.Data)) {
		t.Errorf("voxel sum %g, nibabel/pydicom %g", sum, ref.Sum)
	}
}

// dcmAffineFromNibabel converts nibabel's DICOM affine, which maps (row,
// column, slice) to LPS, into ours, which maps (column, row, slice) to RAS.
// nibabel sorts slices along the normal (column cosine × row cosine), the
// opposite of ours (row cosine × column cosine), so with n slices its slice
// 0 is our slice n-1 and the slice axis is reversed.
func dcmAffineFromNibabel(nib [][]float64, n int) volume.Affine {
	var a volume.Affine
	flip := [4]float64{-1, -1, 1, 1}
	perm := [4]int{1, 0, 2, 3}
	for r := 0; r < 4; r++ {
		for c := 0; c < 4; c++ {
			a[r][c] = flip[r] * nib[r][perm[c]]
		}
	}
	for r := 0; r < 3; r++ {
		a[r][3] += float64(n-1) * a[r][2]
		a[r][2] = -a[r][2]
	}
	return a
}

func TestWriteDICOMSeriesDeterministic(t *testing.T) {
	v := dcmObliqueVolume(t, [3]int{4, 3, 3}, false)
	d1, d2 := t.TempDir(), t.TempDir()
	opts := dcmDemoOptions("HMRU-0003/T1")
	for _, d := range []string{d1, d2} {
		if err := WriteSeries(d, v, opts); err != nil {
			t.Fatal(err)
		}
	}
	f1, f2 := dcmSeriesFiles(t, d1), dcmSeriesFiles(t, d2)
	for i := range f1 {
		b1, _ := os.ReadFile(f1[i])
		b2, _ := os.ReadFile(f2[i])
		if !bytes.Equal(b1, b2) {
			t.Fatalf("%s and %s differ", f1[i], f2[i])
		}
	}
	other := opts
	other.Seed = "HMRU-0004/T1"
	if DeriveUID(opts.Seed, "series") == DeriveUID(other.Seed, "series") {
		t.Error("different seeds give the same series UID")
	}
	if u := DeriveUID(opts.Seed, "series"); len(u) > 64 || u[:5] != "2.25." {
		t.Errorf("UID %q: want the 2.25 root and at most 64 characters (PS3.5 9.1)", u)
	}
}

func TestWriteDICOMSeriesRefuses(t *testing.T) {
	v := dcmObliqueVolume(t, [3]int{3, 3, 2}, true)
	if err := WriteSeries(t.TempDir(), v, WriteOptions{}); err == nil {
		t.Error("empty seed accepted")
	}
	bad := v.Clone()
	bad.Data[0] = float32(math.NaN())
	if err := WriteSeries(t.TempDir(), bad, dcmDemoOptions("x")); err == nil {
		t.Error("NaN voxel accepted")
	}
	shear := v.Clone()
	shear.Affine[0][1] = shear.Affine[0][0] // in-plane axes no longer perpendicular
	if err := WriteSeries(t.TempDir(), shear, dcmDemoOptions("x")); err == nil {
		t.Error("sheared in-plane axes accepted")
	}
}

// dcmHUVolume is dcmObliqueVolume's grid holding CT-like values in
// Hounsfield units, from air (-1000) to dense bone (about 2000).
func dcmHUVolume(t testing.TB, dims [3]int, integer bool) *volume.Volume {
	t.Helper()
	v := dcmObliqueVolume(t, dims, true)
	for n := range v.Data {
		x := float64(-1000 + (n*397)%3001)
		if !integer {
			x += 0.3 * float64(n%7)
		}
		v.Data[n] = float32(x)
	}
	return v
}

// TestWriteDICOMSeriesCT writes CT series and reads them back with pydicom
// 2.3 in its strict mode. They must be CT Image Storage (PS3.4 B.5,
// 1.2.840.10008.5.1.4.1.1.2, which pydicom's UID dictionary names) with
// the CT Image Module of PS3.3 C.8.2.1 as far as we can fill it: Image
// Type value 3 AXIAL (C.8.2.1.1.1), one sample, MONOCHROME1 or 2, 16 bits
// allocated, 12 to 16 stored, high bit one less (C.8.2.1.1.2-6), KVP and
// Acquisition Number present (type 2), Rescale Type HU; no MR Image Module
// attributes; and pixel values after pydicom's modality LUT (C.11.1.1.2)
// equal to the Hounsfield units written. One series takes CT from the
// volume's Meta.Modality (integer values, stored as they are), the other
// from the options (fractional values, rescaled to 16 bits).
func TestWriteDICOMSeriesCT(t *testing.T) {
	refcheck.PythonModule(t, "pydicom")
	whole := dcmHUVolume(t, [3]int{6, 5, 3}, true)
	whole.Meta.Modality = "CT"
	frac := dcmHUVolume(t, [3]int{5, 4, 2}, false)
	base := t.TempDir()
	type series struct {
		v    *volume.Volume
		opts WriteOptions
		tol  float64
		kvp  float64
	}
	optsWhole := dcmDemoOptions("HMRU-0005/CT")
	optsWhole.Modality = ""
	optsFrac := dcmDemoOptions("HMRU-0006/CT")
	optsFrac.Modality, optsFrac.KVP = "CT", 120
	lo, hi, _ := frac.Stats()
	all := []series{{whole, optsWhole, 0, 0}, {frac, optsFrac, (hi - lo) / 65535 * 0.51, 120}}
	var files []string
	var owner []int
	for n, s := range all {
		dir := filepath.Join(base, strconv.Itoa(n))
		if err := WriteSeries(dir, s.v, s.opts); err != nil {
			t.Fatal(err)
		}
		for _, f := range dcmSeriesFiles(t, dir) {
			files = append(files, f)
			owner = append(owner, n)
		}
		got, err := volume.Load([]string{dir}, volume.LoadOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if got.Meta.Modality != "CT" {
			t.Errorf("series %d: read back as modality %q", n, got.Meta.Modality)
		}
	}
	var refs []dcmStrictRef
	refcheck.RunPython(t, dicomRef, &refs, append([]string{"strict"}, files...)...)
	if len(refs) != len(files) {
		t.Fatalf("%d results for %d files", len(refs), len(files))
	}
	mrOnly := []string{"MagneticFieldStrength", "EchoTime", "RepetitionTime", "InversionTime", "FlipAngle",
		"ScanningSequence", "SequenceVariant", "MRAcquisitionType", "EchoTrainLength", "SpacingBetweenSlices"}
	k := map[int]int{}
	for i, r := range refs {
		s := all[owner[i]]
		slice := k[owner[i]]
		k[owner[i]]++
		if r.SOPClass != CTImageStorage || r.MediaSOPClass != CTImageStorage || r.SOPClassName != "CT Image Storage" || r.Modality != "CT" {
			t.Errorf("%s: SOP class %s (%s) / %s, modality %s", r.File, r.SOPClass, r.SOPClassName, r.MediaSOPClass, r.Modality)
		}
		if len(r.ImageType) < 3 || r.ImageType[2] != "AXIAL" || r.RescaleType != "HU" || r.SamplesPerPixel != 1 ||
			(r.Photometric != "MONOCHROME1" && r.Photometric != "MONOCHROME2") || r.BitsAllocated != 16 ||
			r.BitsStored < 12 || r.BitsStored > 16 || r.HighBit != r.BitsStored-1 {
			t.Errorf("%s: image type %v, rescale type %q, pixel attributes %d %s %d/%d/%d", r.File, r.ImageType, r.RescaleType,
				r.SamplesPerPixel, r.Photometric, r.BitsAllocated, r.BitsStored, r.HighBit)
		}
		for _, kw := range []string{"KVP", "AcquisitionNumber", "RescaleIntercept", "RescaleSlope", "PatientPosition", "SliceThickness"} {
			if !slices.Contains(r.Keywords, kw) {
				t.Errorf("%s: %s missing", r.File, kw)
			}
		}
		for _, kw := range mrOnly {
			if slices.Contains(r.Keywords, kw) {
				t.Errorf("%s: MR attribute %s in a CT image", r.File, kw)
			}
		}
		if s.kvp == 0 && (!slices.Contains(r.Empty, "KVP") || r.KVP != nil) || s.kvp != 0 && (r.KVP == nil || *r.KVP != s.kvp) {
			t.Errorf("%s: KVP %v, want %v (0 for empty)", r.File, r.KVP, s.kvp)
		}
		if r.ImageComments != notice.Full {
			t.Errorf("%s: ImageComments %q", r.File, r.ImageComments)
		}
		nx, ny := s.v.Dims[0], s.v.Dims[1]
		if len(r.Values) != nx*ny {
			t.Fatalf("%s: %d values", r.File, len(r.Values))
		}
		for j := 0; j < ny; j++ {
			for i := 0; i < nx; i++ {
				if got, want := r.Values[j*nx+i], float64(s.v.At(i, j, slice)); math.Abs(got-want) > s.tol {
					t.Fatalf("%s: pixel (%d,%d) = %g HU, want %g", r.File, i, j, got, want)
				}
			}
		}
	}
}

// TestWriteDICOMSeriesModality: a modality other than MR or CT is refused
// before anything is written; lower case and spaces are tidied.
func TestWriteDICOMSeriesModality(t *testing.T) {
	v := dcmObliqueVolume(t, [3]int{3, 3, 2}, true)
	for _, m := range []string{"PT", "OT", "MRI"} {
		dir := filepath.Join(t.TempDir(), "out")
		opts := dcmDemoOptions("x")
		opts.Modality = m
		if err := WriteSeries(dir, v, opts); err == nil {
			t.Errorf("modality %q accepted", m)
		}
		if _, err := os.Stat(dir); err == nil {
			t.Errorf("modality %q: folder made", m)
		}
	}
	for in, want := range map[[2]string]string{{" ct ", ""}: "CT", {"", "ct"}: "CT", {"", "PT"}: "MR", {"", ""}: "MR", {"mr", "CT"}: "MR"} {
		if got, err := seriesModality(in[0], in[1]); err != nil || got != want {
			t.Errorf("options %q, volume %q: %q (%v), want %q", in[0], in[1], got, err, want)
		}
	}
}
