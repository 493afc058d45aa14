package main

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"brightfold/inference"
	"brightfold/inference/fitcheck"
	"brightfold/internal/phantom"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	"brightfold/internal/volume/nifti"
)

// templateCases writes coarse (4 mm) phantoms of seed 42 until each class
// has perClass cases, alternately calibration and validation, and returns
// the manifest's path.
func templateCases(t *testing.T, dir string, perClass int) string {
	t.Helper()
	n := [2]int{}
	rows := []string{"path,label,split"}
	for i := 0; n[0] < perClass || n[1] < perClass; i++ {
		c, err := phantom.Generate(42, i, phantom.Options{VoxelMM: 4})
		if err != nil {
			t.Fatal(err)
		}
		l := c.Subject.Label
		if n[l] >= perClass {
			continue
		}
		p := filepath.Join(dir, fmt.Sprintf("case-%03d.nii.gz", i))
		if err := nifti.Write(p, c.Volume, nifti.WriteOptions{}); err != nil {
			t.Fatal(err)
		}
		split := []string{"calibration", "validation"}[n[l]%2]
		n[l]++
		rows = append(rows, fmt.Sprintf("%s,%s,%s", filepath.Base(p), []string{"no_pattern", "atrophy_pattern"}[l], split))
	}
	man := filepath.Join(dir, "cases.csv")
	if err := os.WriteFile(man, []byte(strings.Join(rows, "\n")+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	return man
}

// movedPhantom writes phantom (seed 43) i with its world moved by m (the
// voxels stay; the affine becomes m·affine).
func movedPhantom(t *testing.T, dir, name string, i int, m volume.Affine) string {
	t.Helper()
	c, err := phantom.Generate(43, i, phantom.Options{VoxelMM: 4})
	if err != nil {
		t.Fatal(err)
	}
	v := c.Volume
	v.Affine = m.Mul(v.Affine)
	p := filepath.Join(dir, name+".nii.gz")
	if err := nifti.Write(p, v, nifti.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	return p
}

// alignmentCheck scores scan with the model folder and returns its
// alignment_quality check.
func alignmentCheck(t *testing.T, scan, mf, lib string) fitcheck.Check {
	t.Helper()
	js, _ := runBF(t, "score", scan, "--model", mf, "--json", "--ort-lib", lib)
	var s struct {
		OOD struct {
			Checks []fitcheck.Check `json:"checks"`
		} `json:"ood"`
	}
	if err := json.Unmarshal([]byte(js), &s); err != nil {
		t.Fatal(err)
	}
	for _, c := range s.OOD.Checks {
		if c.Name == inference.CheckAlignment {
			return c
		}
	}
	t.Fatalf("score of %s has no %s check:\n%s", scan, inference.CheckAlignment, js)
	return fitcheck.Check{}
}

// sha256sum is GNU coreutils' sha256 of a file (the outside reference for
// the card's template_sha256).
func sha256sum(t *testing.T, p string) string {
	t.Helper()
	refcheck.Path(t, "/usr/bin/sha256sum")
	out, err := exec.Command("/usr/bin/sha256sum", p).Output()
	if err != nil {
		t.Fatal(err)
	}
	return strings.Fields(string(out))[0]
}

// TestModelMakeTemplate: `model make --template` (and --build-template)
// with the demo model on 4 mm phantoms copies (builds) the template into
// the model folder, records its sha256 (checked against coreutils
// sha256sum) and the calibration cases' metric range; a tampered template
// is refused on load; `score` of a rotated and shifted phantom passes the
// alignment check and a phantom squashed to 0.6 of its height fails it.
func TestModelMakeTemplate(t *testing.T) {
	lib := refcheck.ORTLib(t)
	model := filepath.Join(refcheck.RepoRoot(), "assets", "demo-model", "model.onnx")
	dir := t.TempDir()
	man := templateCases(t, dir, 10)
	tc, err := phantom.Generate(7, 0, phantom.Options{VoxelMM: 4})
	if err != nil {
		t.Fatal(err)
	}
	tpl := filepath.Join(dir, "given-template.nii.gz")
	if err := nifti.Write(tpl, tc.Volume, nifti.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	cz, sz := math.Cos(10*math.Pi/180), math.Sin(10*math.Pi/180)
	moved := movedPhantom(t, dir, "moved", 0, volume.Affine{{cz, -sz, 0, 6}, {sz, cz, 0, -4}, {0, 0, 1, 3}, {0, 0, 0, 1}})
	squashed := movedPhantom(t, dir, "squashed", 1, volume.Affine{{1, 0, 0, 0}, {0, 1, 0, 0}, {0, 0, 0.6, 0}, {0, 0, 0, 1}})

	for _, mode := range []string{"given", "built"} {
		t.Run(mode, func(t *testing.T) {
			mf := filepath.Join(dir, "mf-"+mode)
			args := []string{"model", "make", model, "--cases", man, "--classes", "no_pattern,atrophy_pattern",
				"--out", mf, "--ort-lib", lib, "--spacing", "4", "--align", "affine"}
			if mode == "given" {
				args = append(args, "--template", tpl)
				runBF(t, args...)
			} else {
				args = append(args, "--build-template")
				buildWithUnreadable(t, dir, man, args)
			}
			folder, err := inference.LoadModelFolder(mf)
			if err != nil {
				t.Fatal(err)
			}
			al := folder.Card.Preprocessing.Alignment
			if al == nil || al.Method != "affine" || al.Metric != "ncc" || al.Template != "template.nii.gz" {
				t.Fatalf("card alignment %+v", al)
			}
			inFolder := filepath.Join(mf, al.Template)
			if got := sha256sum(t, inFolder); al.TemplateSHA256 != got {
				t.Errorf("card template_sha256 %s, sha256sum %s", al.TemplateSHA256, got)
			}
			if mode == "given" {
				if a, b := sha256sum(t, tpl), sha256sum(t, inFolder); a != b {
					t.Errorf("the folder's template is not a byte copy of the given one (%s vs %s)", b, a)
				}
			} else {
				v, err := volume.Load([]string{inFolder}, volume.LoadOptions{})
				if err != nil {
					t.Fatal(err)
				}
				if !strings.Contains(v.Meta.Description, "Research") {
					t.Errorf("built template descrip %q lacks the notice", v.Meta.Description)
				}
			}
			r := al.MetricRange
			if r == nil || !(r[0] > 0.5 && r[0] <= r[1] && r[1] <= 1) || !strings.Contains(al.MetricRangeMethod, "10 calibration cases") {
				t.Fatalf("metric_range %v (%q): want the 10 calibration cases' NCC range inside (0.5, 1]", r, al.MetricRangeMethod)
			}
			t.Logf("%s template: calibration NCC range %.4f to %.4f", mode, r[0], r[1])
			if show, _ := runBF(t, "model", "show", mf); !strings.Contains(show, "affine to template.nii.gz (sha256 "+al.TemplateSHA256) {
				t.Errorf("model show lacks the alignment line:\n%s", show)
			}

			if ch := alignmentCheck(t, moved, mf, lib); !ch.Pass || !strings.Contains(ch.Threshold, "calibration") {
				t.Errorf("rotated 10° and shifted phantom: %+v, want a pass against the calibration range", ch)
			} else {
				t.Logf("moved: ncc %.4f, %s", ch.Value, ch.Explanation)
			}
			if ch := alignmentCheck(t, squashed, mf, lib); ch.Pass || !strings.Contains(ch.Explanation, "could not be matched") {
				t.Errorf("phantom squashed to 0.6 of its height: %+v, want a failure", ch)
			} else {
				t.Logf("squashed: %s", ch.Explanation)
			}

			recalibrateAligned(t, dir, mf, man, moved, lib)

			// a swapped template is refused when the folder is loaded
			b, err := os.ReadFile(inFolder)
			if err != nil {
				t.Fatal(err)
			}
			b[len(b)/2] ^= 0xff
			if err := os.WriteFile(inFolder, b, 0o644); err != nil {
				t.Fatal(err)
			}
			if _, err := inference.LoadModelFolder(mf); err == nil || !strings.Contains(err.Error(), "sha256") {
				t.Errorf("tampered template: got %v, want a sha256 refusal", err)
			}
		})
	}
}

// buildWithUnreadable runs `model make --build-template` (args) on man with
// an unreadable calibration scan put first: without --skip-unreadable it is
// refused at once naming the file (exit 2, nothing written); with it the
// template is built from the others and the scan is listed once as skipped
// and counted in the card's provenance.
func buildWithUnreadable(t *testing.T, dir, man string, args []string) {
	t.Helper()
	if err := os.WriteFile(filepath.Join(dir, "broken.nii.gz"), []byte("not a scan"), 0o644); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(man)
	if err != nil {
		t.Fatal(err)
	}
	head, rest, _ := strings.Cut(string(b), "\n")
	withBroken := filepath.Join(dir, "cases-broken.csv")
	if err := os.WriteFile(withBroken, []byte(head+"\nbroken.nii.gz,no_pattern,calibration\n"+rest), 0o644); err != nil {
		t.Fatal(err)
	}
	a := append([]string{}, args...)
	for i := range a {
		if a[i] == man {
			a[i] = withBroken
		}
	}
	out := a[slices.Index(a, "--out")+1]
	code, _, stderr := runCLI(a...)
	if code != 2 || !strings.Contains(stderr, "broken.nii.gz") || !strings.Contains(stderr, "--skip-unreadable") {
		t.Fatalf("--build-template with an unreadable calibration scan: exit %d, %q; want exit 2 naming broken.nii.gz and --skip-unreadable", code, stderr)
	}
	if _, err := os.Stat(out); err == nil {
		t.Fatal("a refused model make left a folder")
	}
	_, stderr = runBF(t, append(a, "--skip-unreadable")...)
	if n := strings.Count(stderr, "skipped (cannot be prepared): broken.nii.gz"); n != 1 {
		t.Errorf("broken.nii.gz listed %d times as skipped, want once:\n%s", n, stderr)
	}
	folder, err := inference.LoadModelFolder(out)
	if err != nil {
		t.Fatal(err)
	}
	if p := folder.Card.Provenance; p == nil || p.Skipped != 1 {
		t.Errorf("card provenance %+v, want 1 skipped scan", p)
	}
}

// recalibrateAligned recalibrates the aligned model folder mf on all 20 of
// its cases (recalibration needs 10 per class) as a new site: the new card keeps the alignment (method,
// metric, template file, its sha256 checked against coreutils sha256sum,
// calibration range) and the moved phantom scored with it passes the
// alignment check.
func recalibrateAligned(t *testing.T, dir, mf, man, moved, lib string) {
	t.Helper()
	b, err := os.ReadFile(man)
	if err != nil {
		t.Fatal(err)
	}
	rows := []string{"path,label,site"}
	for _, l := range strings.Split(strings.TrimSpace(string(b)), "\n")[1:] {
		f := strings.Split(l, ",")
		rows = append(rows, f[0]+","+f[1]+",harbour-east")
	}
	site := filepath.Join(dir, filepath.Base(mf)+"-site.csv")
	if err := os.WriteFile(site, []byte(strings.Join(rows, "\n")+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	out := mf + "-east"
	runBF(t, "model", "recalibrate", mf, "--cases", site, "--out", out, "--ort-lib", lib)
	parent, err := inference.LoadModelFolder(mf)
	if err != nil {
		t.Fatal(err)
	}
	child, err := inference.LoadModelFolder(out)
	if err != nil {
		t.Fatalf("recalibrated aligned folder does not load: %v", err)
	}
	pa, ca := parent.Card.Preprocessing.Alignment, child.Card.Preprocessing.Alignment
	if ca == nil || ca.Method != pa.Method || ca.Metric != pa.Metric || ca.Template != pa.Template ||
		ca.TemplateSHA256 != pa.TemplateSHA256 || ca.MetricRange == nil || *ca.MetricRange != *pa.MetricRange {
		t.Fatalf("recalibrated alignment %+v, parent's %+v", ca, pa)
	}
	if got := sha256sum(t, filepath.Join(out, ca.Template)); got != pa.TemplateSHA256 {
		t.Errorf("recalibrated folder's template sha256sum %s, card %s", got, pa.TemplateSHA256)
	}
	if r := child.Card.Provenance.Recalibration; r == nil || r.Site != "harbour-east" || r.N != len(rows)-1 {
		t.Errorf("recalibration provenance %+v, want site harbour-east and %d cases", r, len(rows)-1)
	}
	if ch := alignmentCheck(t, moved, out, lib); !ch.Pass {
		t.Errorf("moved phantom scored with the recalibrated folder: %+v, want a pass", ch)
	}
}

// TestModelMakeTemplateRefusals: contradictory or unknown alignment flags
// and a missing template are refused at once with exit 2, nothing written.
func TestModelMakeTemplateRefusals(t *testing.T) {
	dir := t.TempDir()
	model := filepath.Join(refcheck.RepoRoot(), "assets", "demo-model", "model.onnx")
	man := filepath.Join(dir, "m.csv")
	os.WriteFile(man, []byte("path,label\nx.nii,a\n"), 0o644)
	base := []string{"model", "make", model, "--cases", man, "--classes", "a,b", "--out", filepath.Join(dir, "o")}
	missing := filepath.Join(dir, "none.nii.gz")
	for _, c := range []struct {
		extra []string
		want  string
	}{
		{[]string{"--template", missing, "--build-template"}, "not both"},
		{[]string{"--build-template", "--align", "warp"}, "--align: want rigid or affine"},
		{[]string{"--build-template", "--metric", "ssd"}, "--metric: want ncc or mi"},
		{[]string{"--template", missing}, "none.nii.gz"},
	} {
		code, _, stderr := runCLI(append(append([]string{}, base...), c.extra...)...)
		if code != 2 || !strings.Contains(stderr, c.want) {
			t.Errorf("%v: exit %d, %q; want exit 2 with %q", c.extra, code, stderr, c.want)
		}
	}
	if _, err := os.Stat(filepath.Join(dir, "o")); err == nil {
		t.Error("a refused model make left a folder")
	}
}
