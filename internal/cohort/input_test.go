package cohort

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func TestReadBIDSWithParticipants(t *testing.T) {
	root := writeTestBIDS(t, t.TempDir(), 7, 5, 6)
	// a file of another suffix and a stray file are not cases
	must(t, os.WriteFile(filepath.Join(root, "sub-HMRU0001", "anat", "sub-HMRU0001_T2w.nii.gz"), []byte("x"), 0o644))
	d, err := Open(root, "")
	must(t, err)
	if d.Kind != KindBIDS || len(d.Cases) != 5 || !strings.HasPrefix(d.Name, "Harbourside") {
		t.Fatalf("kind %s, %d cases, name %q", d.Kind, len(d.Cases), d.Name)
	}
	c := d.Cases[0]
	if c.Participant != "HMRU0001" || c.Entities != "sub-HMRU0001" || c.Suffix != "T1w" || c.Label < 0 {
		t.Errorf("case 0: %+v", c)
	}
	for _, k := range []string{"age", "sex", "site"} {
		if c.Covariates[k] == "" {
			t.Errorf("covariate %s missing: %v", k, c.Covariates)
		}
	}
	if err := d.Select([]string{"sub-HMRU0002", "HMRU0004"}); err != nil || len(d.Cases) != 2 {
		t.Errorf("select: %v, %d cases", err, len(d.Cases))
	}
	if err := d.Select([]string{"NOPE"}); err == nil || !strings.Contains(err.Error(), "NOPE") {
		t.Errorf("unknown label: %v", err)
	}
}

func TestParseBIDSName(t *testing.T) {
	ents, suf, err := ParseBIDSName("sub-01_ses-pre_acq-mprage_run-2_T1w")
	if err != nil || suf != "T1w" || len(ents) != 4 || ents[1] != [2]string{"ses", "pre"} {
		t.Fatalf("%v %q %v", ents, suf, err)
	}
	for _, bad := range []string{"T1w", "ses-1_sub-01_T1w", "sub-01_sub-02_T1w", "sub-0_1_T1w", "sub-01_", "sub-a.b_T1w"} {
		if _, _, err := ParseBIDSName(bad); err == nil {
			t.Errorf("%q accepted", bad)
		}
	}
}

func TestManifest(t *testing.T) {
	dir := t.TempDir()
	m := "path,label,split,site,age,sex,scanner\nscans/a.nii.gz,1,test,site-A,61,F,x\n/abs/b.nii,0,,site-B,70,M,y\nc.nii.gz,,,site-A,,F,\n"
	d, err := ParseManifest([]byte(m), dir)
	must(t, err)
	if len(d.Cases) != 3 || strings.Join(d.Covariates, ",") != "site,age,sex,scanner" {
		t.Fatalf("%d cases, covariates %v", len(d.Cases), d.Covariates)
	}
	a := d.Cases[0]
	if a.Participant != "a" || a.Paths[0] != filepath.Join(dir, "scans", "a.nii.gz") || a.Label != 1 || a.Split != "test" || a.Covariates["scanner"] != "x" {
		t.Errorf("a: %+v", a)
	}
	if d.Cases[1].Paths[0] != "/abs/b.nii" || d.Cases[2].Label != -1 {
		t.Errorf("b, c: %+v %+v", d.Cases[1], d.Cases[2])
	}
	for bad, want := range map[string]string{
		"":                        "empty manifest",
		"label\n1\n":              "no path column",
		"path,label\nx.nii,maybe": "line 2",
		"path,path\nx,y\n":        "twice",
		"path,label\n,1\n":        "empty path",
	} {
		if _, err := ParseManifest([]byte(bad), dir); err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("%q: got %v, want %q", bad, err, want)
		}
	}
}

func TestParticipantsTable(t *testing.T) {
	cols, rows, err := ParseParticipants([]byte("participant_id\tage\tsex\nsub-01\t34\tF\n02\tn/a\tM\n"))
	if err != nil || len(cols) != 2 || rows["01"]["age"] != "34" || rows["02"]["sex"] != "M" {
		t.Fatalf("%v %v %v", cols, rows, err)
	}
	for _, bad := range []string{"age\n1\n", "participant_id\tage\nsub-01\n", "participant_id\nsub-01\nsub-01\n"} {
		if _, _, err := ParseParticipants([]byte(bad)); err == nil {
			t.Errorf("%q accepted", bad)
		}
	}
}

func TestFolderOfScans(t *testing.T) {
	dir := t.TempDir()
	for _, p := range []string{"p1/scan.nii.gz", "p2/scan.nii", "p2/other.nii", "top.nii.gz", "d1/x.dcm", "d1/y.dcm", ".hidden/z.nii",
		"out/dataset_description.json", "out/sub-p1/anat/sub-p1_desc-lrp_relevance.nii.gz", "derivatives/x/a.nii"} {
		must(t, os.MkdirAll(filepath.Join(dir, filepath.Dir(p)), 0o755))
		must(t, os.WriteFile(filepath.Join(dir, p), []byte("x"), 0o644))
	}
	d, err := Open(dir, "")
	must(t, err)
	var got []string
	for _, c := range d.Cases {
		got = append(got, c.Participant+"="+c.Source)
	}
	want := "d1=d1,p1=p1/scan.nii.gz,p2othernii=p2/other.nii,p2scannii=p2/scan.nii,top=top.nii.gz"
	if strings.Join(got, ",") != want {
		t.Errorf("got %s\nwant %s", strings.Join(got, ","), want)
	}
}

func TestShardsPartitionByParticipant(t *testing.T) {
	d := &Dataset{}
	for i := 0; i < 23; i++ {
		for _, ses := range []string{"1", "2"} {
			p := string(rune('a'+i%26)) + string(rune('a'+i/26))
			d.Cases = append(d.Cases, Case{Participant: p, Session: ses, Entities: entityStem(p, ses)})
		}
	}
	for _, n := range []int{1, 2, 4, 7, 30} {
		seen := map[string]int{}
		where := map[string]int{}
		sizes := []int{}
		for i := 0; i < n; i++ {
			cs := Shard{i, n}.Cases(d)
			sizes = append(sizes, len(cs))
			for _, c := range cs {
				seen[c.Entities]++
				if w, ok := where[c.Participant]; ok && w != i {
					t.Errorf("n=%d: participant %s in shards %d and %d", n, c.Participant, w, i)
				}
				where[c.Participant] = i
			}
		}
		if len(seen) != len(d.Cases) {
			t.Errorf("n=%d: %d of %d cases covered", n, len(seen), len(d.Cases))
		}
		for k, v := range seen {
			if v != 1 {
				t.Errorf("n=%d: %s in %d shards", n, k, v)
			}
		}
		lo, hi := sizes[0], sizes[0]
		for _, s := range sizes {
			lo, hi = min(lo, s), max(hi, s)
		}
		if hi-lo > 2 { // two sessions per participant
			t.Errorf("n=%d: shard sizes %v", n, sizes)
		}
	}
	for _, bad := range []string{"4/4", "-1/2", "1", "a/b", "0/0"} {
		if _, err := ParseShard(bad); err == nil {
			t.Errorf("%q accepted", bad)
		}
	}
}
