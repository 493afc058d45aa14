package cohort

import (
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"brightfold/internal/notice"
	"brightfold/internal/volume"
)

// TestSweepOutputsResumeAndShards: a sweep writes BIDS Derivatives outputs
// (BIDS 1.9, "BIDS Derivatives": dataset_description.json with DatasetType
// "derivative" and GeneratedBy; Sources in the map's sidecar); a second run
// skips every case and changes no byte; two shards into one folder give the
// same results as one process; an unreadable scan is a "not scored" result.
func TestSweepOutputsResumeAndShards(t *testing.T) {
	mf, sess := demoSession(t)
	dir := t.TempDir()
	root := writeTestBIDS(t, dir, 11, 6, 4)
	bad := filepath.Join(root, "sub-BAD", "anat", "sub-BAD_T1w.nii.gz")
	must(t, os.MkdirAll(filepath.Dir(bad), 0o755))
	must(t, os.WriteFile(bad, []byte("not a NIfTI file"), 0o644))
	d, err := Open(root, "")
	must(t, err)
	o := Options{Model: mf, Session: sess, Map: "gradinput", Jobs: 2, By: Generator{Name: "brightfold", Version: "test"}}
	one := filepath.Join(dir, "one")
	sum, err := Sweep(context.Background(), d, one, o)
	must(t, err)
	if sum.Scored != 6 || sum.NotScored != 1 || sum.Skipped != 0 {
		t.Fatalf("first run: %+v", sum)
	}
	first := readTree(t, one)
	sum, err = Sweep(context.Background(), d, one, o)
	must(t, err)
	if sum.Skipped != 7 {
		t.Fatalf("second run skipped %d of 7", sum.Skipped)
	}
	if !reflect.DeepEqual(first, readTree(t, one)) {
		t.Error("second run changed the outputs")
	}

	var desc map[string]any
	must(t, json.Unmarshal([]byte(first[DescriptionFile]), &desc))
	if desc["DatasetType"] != "derivative" || desc["BIDSVersion"] == nil || desc["GeneratedBy"] == nil || desc["SourceDatasets"] == nil || desc["notice"] != notice.Full {
		t.Errorf("dataset_description.json: %v", desc)
	}
	var rec Record
	must(t, json.Unmarshal([]byte(first["sub-BAD/anat/sub-BAD_result.json"]), &rec))
	if !strings.HasPrefix(rec.Status, "not scored: ") || strings.Contains(rec.Status, dir) {
		t.Errorf("unreadable case: status %q", rec.Status)
	}
	side := first["sub-HMRU0001/anat/sub-HMRU0001_desc-gradinput_relevance.json"]
	if !strings.Contains(side, `"Sources": [`) || !strings.Contains(side, "bids:raw:sub-HMRU0001/anat/sub-HMRU0001_T1w.nii.gz") || !strings.Contains(side, notice.Full) {
		t.Errorf("relevance sidecar:\n%s", side)
	}
	m, err := volume.Load([]string{filepath.Join(one, "sub-HMRU0001/anat/sub-HMRU0001_desc-gradinput_relevance.nii.gz")}, volume.LoadOptions{})
	must(t, err)
	src, err := volume.Load([]string{filepath.Join(root, "sub-HMRU0001/anat/sub-HMRU0001_T1w.nii.gz")}, volume.LoadOptions{})
	must(t, err)
	if m.Dims != src.Dims || m.Affine != src.Affine {
		t.Errorf("map grid %v %v, scan %v %v", m.Dims, m.Affine, src.Dims, src.Affine)
	}

	// the same options with another map method are not the same outputs
	o2 := o
	o2.Map = "none"
	if _, err := Collect(d, one, mf.SHA256, "none"); err == nil || !strings.Contains(err.Error(), "another model folder or options") {
		t.Errorf("collect with other options: %v", err)
	}

	shards := filepath.Join(dir, "shards")
	for i := 0; i < 3; i++ {
		os := o
		os.Shard, os.Jobs = Shard{i, 3}, 1
		_, err := Sweep(context.Background(), d, shards, os)
		must(t, err)
		if i == 0 {
			if _, err := Collect(d, shards, mf.SHA256, o.Map); err == nil || !strings.Contains(err.Error(), "no complete result") {
				t.Errorf("group after one shard: %v", err)
			}
		}
	}
	a, err := Collect(d, one, mf.SHA256, o.Map)
	must(t, err)
	b, err := Collect(d, shards, mf.SHA256, o.Map)
	must(t, err)
	must(t, WriteScores(one, a, d.Covariates))
	must(t, WriteScores(shards, b, d.Covariates))
	// Relevance maps agree to rounding only: the Go executor's parallel
	// reductions add in an order that depends on the goroutines' timing.
	if x, y := readTree(t, one), readTree(t, shards); !reflect.DeepEqual(x, y) {
		for k := range x {
			if strings.Contains(k, "_relevance.") {
				checkMapsClose(t, filepath.Join(one, k), filepath.Join(shards, k))
				continue
			}
			if x[k] != y[k] {
				t.Errorf("%s differs between one process and three shards:\n%.3000s\n%.3000s", k, x[k], y[k])
			}
		}
	}
	tsv := readTree(t, one)[ScoresTable]
	if lines := strings.Split(strings.TrimSpace(tsv), "\n"); len(lines) != 8 || !strings.HasSuffix(lines[1], notice.Full) {
		t.Errorf("scores.tsv:\n%s", tsv)
	}
}

// checkMapsClose compares two relevance maps (NIfTI) or sidecars to a
// relative 1e-6.
func checkMapsClose(t *testing.T, a, b string) {
	t.Helper()
	if strings.HasSuffix(a, ".json") {
		var x, y map[string]any
		ba, _ := os.ReadFile(a)
		bb, _ := os.ReadFile(b)
		must(t, json.Unmarshal(ba, &x))
		must(t, json.Unmarshal(bb, &y))
		sx, sy := x["checks"].(map[string]any)["relevance_sum"].(float64), y["checks"].(map[string]any)["relevance_sum"].(float64)
		if math.Abs(sx-sy) > 1e-6*math.Abs(sx) {
			t.Errorf("%s: relevance_sum %v vs %v", filepath.Base(a), sx, sy)
		}
		return
	}
	va, err := volume.Load([]string{a}, volume.LoadOptions{})
	must(t, err)
	vb, err := volume.Load([]string{b}, volume.LoadOptions{})
	must(t, err)
	var peak, diff float64
	for i := range va.Data {
		peak = math.Max(peak, math.Abs(float64(va.Data[i])))
		diff = math.Max(diff, math.Abs(float64(va.Data[i]-vb.Data[i])))
	}
	if diff > 1e-5*peak {
		t.Errorf("%s: maps differ by %g (peak %g)", filepath.Base(a), diff, peak)
	}
}
