package main

import (
	"bytes"
	"compress/gzip"
	"encoding/binary"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/notice"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

const nibabelDir = "/usr/lib/python3/dist-packages/nibabel/tests/data"

func runCLI(args ...string) (code int, stdout, stderr string) {
	var o, e bytes.Buffer
	code = run(args, &env{stdout: &o, stderr: &e})
	return code, o.String(), e.String()
}

// TestInspectJSONAgainstNibabel: inspect --json on nibabel's anatomical.nii
// and example4d.nii.gz reports the shape, affine, axis code and value range
// nibabel 5.0 reports (volume/nifti/testdata/nifti_ref.py), plus the notice.
func TestInspectJSONAgainstNibabel(t *testing.T) {
	refcheck.PythonModule(t, "nibabel")
	script := filepath.Join(refcheck.RepoRoot(), "internal", "volume", "nifti", "testdata", "nifti_ref.py")
	for _, name := range []string{"anatomical.nii", "example4d.nii.gz"} {
		p := refcheck.Path(t, filepath.Join(nibabelDir, name))
		code, out, errs := runCLI("inspect", p, "--json")
		if code != 0 {
			t.Fatalf("%s: exit %d: %s", name, code, errs)
		}
		var got struct {
			Notice      string        `json:"notice"`
			Format      string        `json:"format"`
			Dims        []int         `json:"dims"`
			SpacingMm   []float64     `json:"spacing_mm"`
			Affine      [4][4]float64 `json:"affine"`
			Orientation string        `json:"orientation"`
			Min, Max    float64
			Mean        float64
			Warnings    []string        `json:"warnings"`
			Metadata    volume.Metadata `json:"metadata"`
		}
		if err := json.Unmarshal([]byte(out), &got); err != nil {
			t.Fatalf("%s: %v\n%s", name, err, out)
		}
		var ref struct {
			Shape   []int         `json:"shape"`
			Affine  [4][4]float64 `json:"affine"`
			Axcodes string        `json:"axcodes"`
			Min     float64       `json:"min"`
			Max     float64       `json:"max"`
			Sum     float64       `json:"sum"`
		}
		refcheck.RunPython(t, script, &ref, "info", p, "0")
		if got.Notice != notice.Full || got.Format != "nifti" {
			t.Errorf("%s: notice %q, format %q", name, got.Notice, got.Format)
		}
		// dims are x, y, z[, t]: nibabel's shape.
		if len(got.Dims) != len(ref.Shape) {
			t.Errorf("%s: dims %v, nibabel shape %v", name, got.Dims, ref.Shape)
		}
		for i := range ref.Shape {
			if i < len(got.Dims) && got.Dims[i] != ref.Shape[i] {
				t.Errorf("%s: dims %v, nibabel shape %v", name, got.Dims, ref.Shape)
			}
		}
		for r := 0; r < 4; r++ {
			for c := 0; c < 4; c++ {
				if math.Abs(got.Affine[r][c]-ref.Affine[r][c]) > 1e-5 {
					t.Errorf("%s: affine %v, nibabel %v", name, got.Affine, ref.Affine)
				}
			}
		}
		n := float64(ref.Shape[0] * ref.Shape[1] * ref.Shape[2])
		if got.Orientation != ref.Axcodes || got.Min != ref.Min || got.Max != ref.Max ||
			math.Abs(got.Mean-ref.Sum/n) > 1e-6*math.Abs(ref.Sum/n) {
			t.Errorf("%s: %s min %g max %g mean %g; nibabel %s %g %g %g", name, got.Orientation,
				got.Min, got.Max, got.Mean, ref.Axcodes, ref.Min, ref.Max, ref.Sum/n)
		}
		if len(got.SpacingMm) != 3 || got.Warnings == nil || got.Metadata.DataType == "" {
			t.Errorf("%s: spacing %v warnings %v metadata %+v", name, got.SpacingMm, got.Warnings, got.Metadata)
		}
	}
}

// TestInspectText: the text form carries the notice and the geometry.
func TestInspectText(t *testing.T) {
	p := refcheck.Path(t, filepath.Join(nibabelDir, "example4d.nii.gz"))
	code, out, errs := runCLI("inspect", p)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, want := range []string{notice.Full, "128 × 96 × 24 × 2", "LAS", "affine (RAS)", "volume        0 of 2", "int16"} {
		if !strings.Contains(out, want) {
			t.Errorf("text output lacks %q:\n%s", want, out)
		}
	}
}

// TestInspectHidesIdentifiers: a DICOM file's patient name (pydicom's
// CT_small.dcm) appears only with --show-identifiers.
func TestInspectHidesIdentifiers(t *testing.T) {
	p := refcheck.Path(t, "/usr/lib/python3/dist-packages/pydicom/data/test_files/CT_small.dcm")
	v, err := volume.Load([]string{p}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if v.Patient.Name == "" || v.Patient.ID == "" {
		t.Fatalf("CT_small.dcm should carry a patient name and ID: %+v", v.Patient)
	}
	for _, args := range [][]string{{"inspect", p}, {"inspect", p, "--json"}} {
		code, out, errs := runCLI(args...)
		if code != 0 {
			t.Fatalf("%v: exit %d: %s", args, code, errs)
		}
		if strings.Contains(out, v.Patient.Name) || strings.Contains(out, v.Patient.ID) {
			t.Errorf("%v printed an identifier:\n%s", args, out)
		}
		if !strings.Contains(out, "hidden") {
			t.Errorf("%v does not say identifiers are hidden", args)
		}
		code, out, _ = runCLI(append(args, "--show-identifiers")...)
		if code != 0 || !strings.Contains(out, v.Patient.Name) {
			t.Errorf("%v --show-identifiers: exit %d, name missing:\n%s", args, code, out)
		}
	}
}

// TestInspectBadInput: malformed NIfTI files give exit code 2 and one line
// naming the file; no input at all is a usage error.
func TestInspectBadInput(t *testing.T) {
	dir := t.TempDir()
	hdr := make([]byte, 352)
	binary.LittleEndian.PutUint32(hdr, 348)
	copy(hdr[344:], "n+1\x00")
	dims := func(d ...int16) []byte {
		b := append([]byte(nil), hdr...)
		for i, x := range d {
			binary.LittleEndian.PutUint16(b[40+2*i:], uint16(x))
		}
		binary.LittleEndian.PutUint16(b[70:], 4) // int16
		binary.LittleEndian.PutUint32(b[108:], math.Float32bits(352))
		return b
	}
	var gz bytes.Buffer
	zw := gzip.NewWriter(&gz)
	zw.Write(dims(3, 10, 10, 10))
	zw.Close()
	corrupt := gz.Bytes()[:gz.Len()/2]
	cases := map[string][]byte{
		"truncated.nii":  hdr[:100],
		"badmagic.nii":   append(append([]byte(nil), dims(3, 2, 2, 2)[:344]...), "xyz\x00...."...),
		"huge.nii":       dims(7, 32767, 32767, 32767, 32767, 32767, 32767, 32767),
		"zero.nii":       dims(3, 4, 0, 4),
		"short.nii":      dims(3, 64, 64, 64),
		"corrupt.nii.gz": corrupt,
	}
	for name, b := range cases {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		code, out, errs := runCLI("inspect", p, "--json")
		if code != 2 || out != "" || strings.Count(errs, "\n") != 1 || !strings.Contains(errs, p) {
			t.Errorf("%s: exit %d, stdout %q, stderr %q", name, code, out, errs)
		}
	}
	if code, _, _ := runCLI("inspect"); code != 2 {
		t.Errorf("no path: exit %d, want 2", code)
	}
	if code, _, _ := runCLI("inspect", filepath.Join(dir, "missing.nii")); code != 2 {
		t.Errorf("missing file: exit %d, want 2", code)
	}
}

// TestInspectSeriesList: a folder with two series (pydicom's CT_small.dcm and
// MR_small.dcm) is listed with a note; --series picks one and describes it.
func TestInspectSeriesList(t *testing.T) {
	src := refcheck.Path(t, "/usr/lib/python3/dist-packages/pydicom/data/test_files")
	dir := t.TempDir()
	for _, n := range []string{"CT_small.dcm", "MR_small.dcm"} {
		b, err := os.ReadFile(filepath.Join(src, n))
		if err != nil {
			refcheck.Missing(t, "%v", err)
		}
		if err := os.WriteFile(filepath.Join(dir, n), b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	code, out, errs := runCLI("inspect", dir, "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var list struct {
		Format string          `json:"format"`
		Note   string          `json:"note"`
		Series []seriesSummary `json:"series"`
		Dims   []int           `json:"dims"`
	}
	if err := json.Unmarshal([]byte(out), &list); err != nil {
		t.Fatal(err)
	}
	if list.Format != "dicom" || len(list.Series) != 2 || list.Note == "" || list.Dims != nil {
		t.Fatalf("series list: %+v", list)
	}
	for _, s := range list.Series {
		code, out, errs = runCLI("inspect", dir, "--json", "--series", s.Key)
		if code != 0 {
			t.Fatalf("--series %s: exit %d: %s", s.Key, code, errs)
		}
		var one struct {
			Dims     []int           `json:"dims"`
			Metadata volume.Metadata `json:"metadata"`
		}
		if err := json.Unmarshal([]byte(out), &one); err != nil {
			t.Fatal(err)
		}
		if len(one.Dims) != 3 || one.Dims[0] != s.Cols || one.Dims[1] != s.Rows || one.Metadata.Modality != s.Modality {
			t.Errorf("--series %s: dims %v modality %q; listed %d×%d %s", s.Key, one.Dims, one.Metadata.Modality, s.Cols, s.Rows, s.Modality)
		}
	}
}
