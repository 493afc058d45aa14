package report

import (
	"encoding/json"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/notice"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

// testScanAndMap is a small LPS scan with a bright ball and a signed map on
// its grid.
func testScanAndMap(t *testing.T) (*volume.Volume, *volume.Volume) {
	t.Helper()
	var a volume.Affine
	a[0][0], a[1][1], a[2][2], a[3][3] = -1.5, -1.5, 2, 1
	a[0][3], a[1][3], a[2][3] = 30, 30, -20
	dims := [3]int{40, 40, 20}
	scan, err := volume.New(dims, a)
	if err != nil {
		t.Fatal(err)
	}
	m, _ := volume.New(dims, a)
	for k := 0; k < dims[2]; k++ {
		for j := 0; j < dims[1]; j++ {
			for i := 0; i < dims[0]; i++ {
				r := math.Hypot(float64(i-20), float64(j-20))
				if r < 15 {
					scan.Data[scan.Index(i, j, k)] = float32(200 - 5*r)
				}
				m.Data[m.Index(i, j, k)] = float32(math.Sin(float64(i)/4) * math.Cos(float64(j+k)/5) * 1e-3)
			}
		}
	}
	scan.Patient.Name = "DEMO^SUBJECT0001"
	m.Patient.Name = "DEMO^SUBJECT0001"
	m.Source = "/secret/path/t1.nii.gz"
	return scan, m
}

// relevance.nii.gz as nibabel (python3-nibabel 5.0) reads it: the scan's
// shape and sform affine (NIfTI-1 srow_x/y/z), float32 storage (datatype 16),
// the short notice in the 80-byte descrip field, the values; the sidecar
// carries the full notice and no identifiers.
func TestWriteRelevanceAgainstNibabel(t *testing.T) {
	refcheck.PythonModule(t, "nibabel")
	_, m := testScanAndMap(t)
	dir := t.TempDir()
	nii, side, err := WriteRelevance(dir, m, RelevanceInfo{Method: "lrp", MethodName: "LRP", TargetClass: "atrophy_pattern",
		Checks: map[string]Number{"consistency_error": 1e-7}, Input: "t1.nii.gz"})
	if err != nil {
		t.Fatal(err)
	}
	var got struct {
		Shape   []int
		Affine  [4][4]float64
		Descrip string
		Dtype   string
		Sum     float64
	}
	refcheck.RunPython(t, filepath.Join("testdata", "read_relevance.py"), &got, nii)
	if len(got.Shape) != 3 || got.Shape[0] != 40 || got.Shape[1] != 40 || got.Shape[2] != 20 {
		t.Errorf("nibabel shape %v", got.Shape)
	}
	for r := 0; r < 4; r++ {
		for c := 0; c < 4; c++ {
			if math.Abs(got.Affine[r][c]-m.Affine[r][c]) > 1e-5 {
				t.Errorf("sform[%d][%d] = %v, want %v", r, c, got.Affine[r][c], m.Affine[r][c])
			}
		}
	}
	if got.Descrip != notice.Short || got.Dtype != "float32" {
		t.Errorf("descrip %q, dtype %s", got.Descrip, got.Dtype)
	}
	var want float64
	for _, v := range m.Data {
		want += float64(v)
	}
	if math.Abs(got.Sum-want) > 1e-6 {
		t.Errorf("sum %v, want %v", got.Sum, want)
	}
	raw, err := os.ReadFile(side)
	if err != nil {
		t.Fatal(err)
	}
	var info map[string]any
	if err := json.Unmarshal(raw, &info); err != nil {
		t.Fatal(err)
	}
	if info["notice"] != notice.Full || info["file"] != RelevanceFile || info["method"] != "lrp" {
		t.Errorf("sidecar: %v", info)
	}
	if s := string(raw); containsAny(s, "DEMO^", "/secret/") {
		t.Errorf("sidecar leaks an identifier or path: %s", s)
	}
	nraw, _ := os.ReadFile(nii)
	if containsAny(string(nraw), "DEMO^", "/secret/") {
		t.Error("relevance.nii.gz leaks an identifier or path")
	}
}

func containsAny(s string, subs ...string) bool {
	for _, x := range subs {
		if strings.Contains(s, x) {
			return true
		}
	}
	return false
}

// overlay.png: a decodable PNG with the three planes, colour bar and notice
// (viewer.Montage); a map on another grid is refused.
func TestOverlayFigure(t *testing.T) {
	scan, m := testScanAndMap(t)
	p := filepath.Join(t.TempDir(), OverlayFile)
	f := OverlayFigure{Scan: scan, Map: m, At: scan.Affine.Apply([3]float64{20, 20, 10}), Signed: true,
		Units: "share of the logit per voxel", Title: []string{"Relevance map: LRP"}}
	if err := WriteOverlayPNG(p, f); err != nil {
		t.Fatal(err)
	}
	fh, err := os.Open(p)
	if err != nil {
		t.Fatal(err)
	}
	defer fh.Close()
	img, err := png.Decode(fh)
	if err != nil {
		t.Fatal(err)
	}
	if b := img.Bounds(); b.Dx() < 720 || b.Dy() < 400 {
		t.Errorf("figure %v", b)
	}
	other, _ := volume.New([3]int{10, 10, 10}, scan.Affine)
	f.Map = other
	if err := WriteOverlayPNG(filepath.Join(t.TempDir(), "x.png"), f); err == nil {
		t.Error("a map on another grid was drawn")
	}
}
