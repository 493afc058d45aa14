package manifest

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func TestParseCSV(t *testing.T) {
	m, err := ParseCSV([]byte("\ufeffPath,label,split,site,age,sex,scanner\na/t1.nii.gz,pos,validation,north,71,F,X\n/abs/b.nii,neg,,south,n/a,M,Y\n"), "/root")
	if err != nil {
		t.Fatal(err)
	}
	if len(m.Cases) != 2 || m.Cases[0].Path != "/root/a/t1.nii.gz" || m.Cases[1].Path != "/abs/b.nii" {
		t.Fatalf("paths: %+v", m.Cases)
	}
	c := m.Cases[0]
	if c.Label != "pos" || c.Split != SplitValidation || c.Site != "north" || c.Covariates["age"] != "71" || c.Covariates["scanner"] != "X" || c.ID != "t1.nii" && c.ID != "t1" {
		t.Fatalf("case: %+v", c)
	}
	if _, ok := m.Cases[1].Covariates["age"]; ok {
		t.Fatal("n/a kept as a covariate value")
	}
	if strings.Join(m.Covariates, ",") != "age,sex,scanner" || strings.Join(m.Classes(), ",") != "pos,neg" || strings.Join(m.Sites(), ",") != "north,south" {
		t.Fatalf("covariates %v classes %v sites %v", m.Covariates, m.Classes(), m.Sites())
	}
	for _, bad := range []string{"", "label\nx\n", "path\na\n", "path,label\n", "path,label\na,\n", "path,label,split\na,x,train\n", "path,label\na,x\na,y\n", "path,path,label\n", "path,label\n\"a,x\n"} {
		if _, err := ParseCSV([]byte(bad), "/"); err == nil {
			t.Errorf("%q: accepted", bad)
		}
	}
}

func TestReadBIDS(t *testing.T) {
	dir := t.TempDir()
	for _, p := range []string{"sub-01/anat/sub-01_T1w.nii.gz", "sub-02/ses-a/anat/sub-02_ses-a_T1w.nii", "sub-02/anat/sub-02_T2w.nii.gz"} {
		if err := os.MkdirAll(filepath.Join(dir, filepath.Dir(p)), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join(dir, p), []byte("x"), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	if err := os.WriteFile(filepath.Join(dir, "participants.tsv"), []byte("participant_id\tgroup\tage\tsite\nsub-01\tpatient\t70\tA\nsub-02\tcontrol\t65\tB\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	m, err := Read(dir, "group")
	if err != nil {
		t.Fatal(err)
	}
	if len(m.Cases) != 2 || m.Cases[0].Label != "patient" || m.Cases[1].Label != "control" || m.Cases[1].Site != "B" || m.Cases[0].Covariates["age"] != "70" {
		t.Fatalf("%+v", m.Cases)
	}
	if _, err := Read(dir, ""); err == nil {
		t.Fatal("BIDS without --label-column accepted")
	}
	if _, err := Read(dir, "diagnosis"); err == nil {
		t.Fatal("missing label column accepted")
	}
}

func FuzzParseCSV(f *testing.F) {
	f.Add([]byte("path,label,split,site,age\na.nii,pos,validation,x,3\n"))
	f.Add([]byte("path,label\n\"a\"\"b\",neg\n"))
	f.Fuzz(func(t *testing.T, b []byte) {
		m, err := ParseCSV(b, "/r")
		if err != nil {
			return
		}
		for _, c := range m.Cases {
			if c.Label == "" || c.Path == "" || (c.Split != "" && c.Split != SplitCalibration && c.Split != SplitValidation) {
				t.Fatalf("bad case %+v", c)
			}
		}
		if _, _, err := ParseParticipants(b, "label"); err != nil {
			return
		}
	})
}
