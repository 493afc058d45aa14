package reading

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/inputerr"
	"brightfold/internal/phantom"
	"brightfold/internal/refcheck"
)

func writeFile(t *testing.T, p, s string) {
	t.Helper()
	if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(p, []byte(s), 0o644); err != nil {
		t.Fatal(err)
	}
}

func TestLoadCohortFolder(t *testing.T) {
	dir := t.TempDir()
	head := strings.Join(phantom.CohortColumns(), ",")
	writeFile(t, filepath.Join(dir, phantom.CohortFile), head+"\n"+
		"HMRU-0002,HMRU-0002/t1.nii.gz,,HMRU-0002/mask.nii.gz,1,0.5,70.0,F,north,none,1.0,notice\n"+
		"HMRU-0001,HMRU-0001/t1.nii.gz,,HMRU-0001/mask.nii.gz,0,0,60.0,M,north,none,1.0,notice\n")
	cs, err := LoadCases(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(cs) != 2 || cs[0].Name != "HMRU-0001/t1.nii.gz" || cs[0].Truth != 0 || cs[1].Truth != 1 ||
		cs[1].Source != filepath.Join(dir, "HMRU-0002", "t1.nii.gz") {
		t.Errorf("cases %+v", cs)
	}
}

func TestLoadManifest(t *testing.T) {
	dir := t.TempDir()
	m := filepath.Join(dir, "list", "manifest.csv")
	writeFile(t, m, "path,truth,split,site,age,sex\nscans/a.nii.gz,1,test,north,61,F\nscans/b.nii,,test,south,70,M\n")
	cs, err := LoadCases(m)
	if err != nil {
		t.Fatal(err)
	}
	if len(cs) != 2 || cs[0].Truth != 1 || cs[1].Truth != -1 || cs[0].Source != filepath.Join(dir, "list", "scans", "a.nii.gz") {
		t.Errorf("cases %+v", cs)
	}
	for _, bad := range []string{"", "name,label\na,1\n", "path,label\na,2\n", "path,truth\na,x\n", "path,label\na,1\na,0\n", "path,label\n"} {
		writeFile(t, m, bad)
		if _, err := LoadCases(m); !inputerr.Is(err) {
			t.Errorf("manifest %q: %v, want an input error naming the file", bad, err)
		}
	}
}

func TestLoadBIDS(t *testing.T) {
	dir := t.TempDir()
	writeFile(t, filepath.Join(dir, "dataset_description.json"), `{"Name": "harbourside", "BIDSVersion": "1.9.0"}`)
	writeFile(t, filepath.Join(dir, "participants.tsv"), "participant_id\tage\tlabel\nsub-01\t60\t1\nsub-02\t61\t0\n")
	writeFile(t, filepath.Join(dir, "sub-01", "anat", "sub-01_T1w.nii.gz"), "x")
	writeFile(t, filepath.Join(dir, "sub-02", "ses-a", "anat", "sub-02_ses-a_T1w.nii"), "x")
	writeFile(t, filepath.Join(dir, "sub-03", "anat", "sub-03_T1w.nii.gz"), "x")
	writeFile(t, filepath.Join(dir, "sub-03", "anat", "sub-03_T2w.nii.gz"), "x")
	cs, err := LoadCases(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(cs) != 3 || cs[0].Truth != 1 || cs[1].Truth != 0 || cs[2].Truth != -1 {
		t.Errorf("cases %+v", cs)
	}
}

// A folder tree of DICOM files without the .dcm extension: one case per series (pydicom's test files,
// python3-pydicom 2.3.1, as the DICOM input).
func TestLoadDICOMTree(t *testing.T) {
	src := "/usr/lib/python3/dist-packages/pydicom/data/test_files/"
	dir := t.TempDir()
	for name, to := range map[string]string{"MR_small.dcm": "a/IM0001", "CT_small.dcm": "b/c/IM0001"} {
		data, err := os.ReadFile(refcheck.Path(t, src+name))
		if err != nil {
			t.Fatal(err)
		}
		writeFile(t, filepath.Join(dir, to), string(data))
	}
	cs, err := LoadCases(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(cs) != 2 || cs[0].Source != filepath.Join(dir, "a") || cs[1].Source != filepath.Join(dir, "b", "c") || cs[0].Series == "" {
		t.Errorf("cases %+v", cs)
	}
}
