package phantom

import (
	"bytes"
	"context"
	"encoding/csv"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"

	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	_ "brightfold/internal/volume/formats"
)

// cohortVoxel is coarse so that a whole cohort with shifts takes seconds.
const cohortVoxel = 8.0

func writeTestCohort(t *testing.T, dir string, n int, shifts bool) []Row {
	t.Helper()
	return writeTestCohortWorkers(t, dir, n, shifts, 0)
}

func writeTestCohortWorkers(t *testing.T, dir string, n int, shifts bool, workers int) []Row {
	t.Helper()
	rows, err := WriteCohort(dir, WriteOptions{N: n, Seed: 9, Shifts: shifts, VoxelMM: cohortVoxel, DICOMEvery: 2, Workers: workers})
	if err != nil {
		t.Fatal(err)
	}
	return rows
}

// readTree returns every file under root by relative path.
func readTree(t *testing.T, root string) map[string][]byte {
	t.Helper()
	files := map[string][]byte{}
	err := filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := os.ReadFile(p)
		rel, _ := filepath.Rel(root, p)
		files[rel] = b
		return err
	})
	if err != nil {
		t.Fatal(err)
	}
	return files
}

func TestCohortSameBytes(t *testing.T) {
	base := t.TempDir()
	a, b := filepath.Join(base, "a"), filepath.Join(base, "b")
	// One case at a time, then three at once: the order of work must not matter.
	writeTestCohortWorkers(t, a, 2, true, 1)
	writeTestCohortWorkers(t, b, 2, true, 3)
	fa, fb := readTree(t, a), readTree(t, b)
	if len(fa) != len(fb) || len(fa) < 20 {
		t.Fatalf("%d vs %d files", len(fa), len(fb))
	}
	for name, data := range fa {
		if !bytes.Equal(data, fb[name]) {
			t.Errorf("%s differs between two runs with the same seed", name)
		}
	}
	for name := range fa {
		if strings.Contains(name, ".tmp") || strings.HasSuffix(name, ".nii") {
			t.Errorf("leftover file %s", name)
		}
	}
}

func TestCohortTable(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "cohort")
	rows := writeTestCohort(t, dir, 3, true)
	f, err := os.Open(filepath.Join(dir, CohortFile))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(recs[0], CohortColumns()) {
		t.Fatalf("header %v", recs[0])
	}
	want := []string{"case_id", "nifti_path", "dicom_path", "mask_path", "label", "severity", "age", "sex", "site", "shift"}
	if !slices.Equal(recs[0][:len(want)], want) {
		t.Errorf("first columns %v, want %v", recs[0][:len(want)], want)
	}
	// 3 in-distribution cases and max(1, 3/10) = 1 of each of the 7 shifts.
	if len(recs) != 1+3+7 || len(rows) != 10 {
		t.Fatalf("%d rows", len(recs)-1)
	}
	shifts := map[string]int{}
	for _, r := range recs[1:] {
		shifts[r[9]]++
		if r[len(r)-1] != notice.Full {
			t.Errorf("%s: notice column %q", r[0], r[len(r)-1])
		}
		for _, p := range []string{r[1], r[2], r[3]} {
			if p == "" {
				continue
			}
			if filepath.IsAbs(p) {
				t.Errorf("%s: absolute path %s", r[0], p)
			}
			if _, err := os.Stat(filepath.Join(dir, p)); err != nil {
				t.Errorf("%s: %v", r[0], err)
			}
		}
		if _, err := strconv.ParseFloat(r[5], 64); err != nil {
			t.Errorf("%s: severity %q", r[0], r[5])
		}
	}
	if shifts["none"] != 3 {
		t.Errorf("%d in-distribution rows", shifts["none"])
	}
	for _, sh := range Shifts() {
		if shifts[string(sh)] != 1 {
			t.Errorf("%d rows of shift %s", shifts[string(sh)], sh)
		}
	}
	nt, err := os.ReadFile(filepath.Join(dir, NoticeFile))
	if err != nil || !strings.HasPrefix(string(nt), notice.Full) {
		t.Errorf("%s: %v %q", NoticeFile, err, nt)
	}
}

func TestCohortRefusesForeignFolder(t *testing.T) {
	dir := t.TempDir()
	keep := filepath.Join(dir, "thesis.txt")
	os.WriteFile(keep, []byte("mine"), 0o644)
	_, err := WriteCohort(dir, WriteOptions{N: 1, Seed: 1, VoxelMM: cohortVoxel})
	if err == nil || !inputerr.Is(err) || !strings.Contains(err.Error(), dir) {
		t.Fatalf("non-empty foreign folder: err %v", err)
	}
	if b, _ := os.ReadFile(keep); string(b) != "mine" {
		t.Error("the foreign file was touched")
	}
	ents, _ := os.ReadDir(filepath.Dir(dir))
	for _, e := range ents {
		if strings.Contains(e.Name(), ".tmp-") {
			t.Errorf("temporary folder %s left behind", e.Name())
		}
	}
	// A file where the folder should be is refused too.
	if _, err := WriteCohort(keep, WriteOptions{N: 1, VoxelMM: cohortVoxel}); err == nil || !inputerr.Is(err) {
		t.Errorf("file as cohort folder: %v", err)
	}
	if _, err := WriteCohort(filepath.Join(dir, "x"), WriteOptions{N: 0}); err == nil || !inputerr.Is(err) {
		t.Errorf("N=0: %v", err)
	}
}

func TestCohortReplacesCohort(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "c")
	writeTestCohort(t, dir, 2, false)
	if !IsCohort(dir) {
		t.Fatal("a written cohort is not recognised")
	}
	rows, err := WriteCohort(dir, WriteOptions{N: 1, Seed: 3, VoxelMM: cohortVoxel})
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 1 {
		t.Fatalf("%d rows", len(rows))
	}
	if _, err := os.Stat(filepath.Join(dir, "HMRU-0002")); err == nil {
		t.Error("the old cohort's second case survived the replacement")
	}
}

// TestCohortReadByReferences reads the written cohort with Python's csv
// module, nibabel (NIfTI-1 header fields dim, pixdim, sform, descrip,
// datatype) and pydicom (PS3.3 C.7.1.1 Patient Module: PatientName,
// PatientID; C.7.5.1 General Equipment Module: InstitutionName; C.7.3.1
// General Series Module: Modality; C.7.6.2 Image Plane Module:
// SliceThickness, PixelSpacing).
func TestCohortReadByReferences(t *testing.T) {
	refcheck.PythonModule(t, "nibabel")
	refcheck.PythonModule(t, "pydicom")
	dir := filepath.Join(t.TempDir(), "cohort")
	rows := writeTestCohort(t, dir, 2, true)
	var got struct {
		Columns []string
		Cases   []struct {
			Row         map[string]string
			Shape       []int
			Affine      [4][4]float64
			Zooms       []float64
			Descrip     string
			Datatype    string
			Min, Max    float64
			Sum         float64
			MaskDtype   string `json:"mask_dtype"`
			MaskNonzero int    `json:"mask_nonzero"`
			MaskMax     int    `json:"mask_max"`
			DICOM       *struct {
				Files                                   int
				PatientName, PatientID, InstitutionName string
				Modality                                string
				SliceThickness                          float64
				PixelSpacing                            []float64
				Rows, Columns                           int
			}
		}
	}
	refcheck.RunPython(t, filepath.Join("testdata", "check_cohort.py"), &got, dir)
	if !slices.Equal(got.Columns, CohortColumns()) {
		t.Errorf("csv module read columns %v", got.Columns)
	}
	if len(got.Cases) != len(rows) {
		t.Fatalf("%d cases read, %d written", len(got.Cases), len(rows))
	}
	for i, gc := range got.Cases {
		s := rows[i].Subject
		c, err := Render(s, Options{Shift: s.Shift, VoxelMM: cohortVoxel})
		if err != nil {
			t.Fatal(err)
		}
		v := c.Volume
		if gc.Row["case_id"] != s.ID || gc.Row["shift"] != string(s.Shift) || gc.Row["label"] != strconv.Itoa(s.Label) {
			t.Errorf("row %d: %v", i, gc.Row)
		}
		if !slices.Equal(gc.Shape, v.Dims[:]) {
			t.Errorf("%s: nibabel shape %v, want %v", s.ID, gc.Shape, v.Dims)
		}
		for r := 0; r < 4; r++ {
			for k := 0; k < 4; k++ {
				if math.Abs(gc.Affine[r][k]-v.Affine[r][k]) > 1e-4 {
					t.Errorf("%s: nibabel affine %v, want %v", s.ID, gc.Affine, v.Affine)
				}
			}
		}
		if gc.Descrip != notice.Short {
			t.Errorf("%s: descrip %q", s.ID, gc.Descrip)
		}
		mn, mx, mean := v.Stats()
		if gc.Datatype != "int16" || gc.Min != mn || gc.Max != mx || math.Abs(gc.Sum-mean*float64(v.Len())) > 0.5 {
			t.Errorf("%s: nibabel %s min %g max %g sum %g; generated min %g max %g sum %g",
				s.ID, gc.Datatype, gc.Min, gc.Max, gc.Sum, mn, mx, mean*float64(v.Len()))
		}
		if gc.MaskDtype != "uint8" || (gc.MaskNonzero > 0) != (s.Label == 1) || gc.MaskMax > 3 {
			t.Errorf("%s label %d: mask %s with %d nonzero, max %d", s.ID, s.Label, gc.MaskDtype, gc.MaskNonzero, gc.MaskMax)
		}
		if d := gc.DICOM; d != nil {
			wantMod := "MR"
			if s.Shift == ShiftCT {
				wantMod = "CT"
			}
			if d.PatientName != "DEMO^SUBJECT"+s.ID[5:] || d.PatientID != s.ID || d.InstitutionName != Institution || d.Modality != wantMod {
				t.Errorf("%s: DICOM identifiers %+v", s.ID, *d)
			}
			sp := v.Spacing()
			if d.Files != v.Dims[2] || d.Rows != v.Dims[1] || d.Columns != v.Dims[0] ||
				math.Abs(d.SliceThickness-sp[2]) > 1e-6 || math.Abs(d.PixelSpacing[0]-sp[1]) > 1e-6 {
				t.Errorf("%s: DICOM geometry %+v for dims %v spacing %v", s.ID, *d, v.Dims, sp)
			}
		} else if wantsDICOM(s, 2) {
			t.Errorf("%s: no DICOM series", s.ID)
		}
	}
}

// TestCohortLoadsBack reads every written scan and mask with the volume
// package's NIfTI and DICOM readers: voxels and geometry come back exactly
// as generated (integer intensities are stored without scaling).
func TestCohortLoadsBack(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "cohort")
	rows := writeTestCohort(t, dir, 2, true)
	for _, r := range rows {
		s := r.Subject
		c, err := Render(s, Options{Shift: s.Shift, VoxelMM: cohortVoxel})
		if err != nil {
			t.Fatal(err)
		}
		check := func(what string, paths []string, want *volume.Volume) {
			got, err := volume.Load(paths, volume.LoadOptions{})
			if err != nil {
				t.Errorf("%s %s: %v", s.ID, what, err)
				return
			}
			if got.Dims != want.Dims || !slices.Equal(got.Data, want.Data) {
				t.Errorf("%s %s: dims %v, voxels equal %v", s.ID, what, got.Dims, slices.Equal(got.Data, want.Data))
			}
			for i := 0; i < 4; i++ {
				for j := 0; j < 4; j++ {
					if math.Abs(got.Affine[i][j]-want.Affine[i][j]) > 1e-3 {
						t.Errorf("%s %s: affine %v, want %v", s.ID, what, got.Affine, want.Affine)
						return
					}
				}
			}
		}
		check("nifti", []string{filepath.Join(dir, r.NIfTIPath)}, c.Volume)
		check("mask", []string{filepath.Join(dir, r.MaskPath)}, c.Mask)
		if r.DICOMPath != "" {
			check("dicom", []string{filepath.Join(dir, r.DICOMPath)}, c.Volume)
		}
	}
}

func TestCohortCancelled(t *testing.T) {
	parent := t.TempDir()
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	_, err := WriteCohort(filepath.Join(parent, "c"), WriteOptions{N: 3, VoxelMM: cohortVoxel, Context: ctx})
	if err == nil {
		t.Fatal("a cancelled cohort was written")
	}
	if ents, _ := os.ReadDir(parent); len(ents) != 0 {
		t.Errorf("left behind: %v", ents)
	}
}
