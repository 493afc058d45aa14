package main

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/notice"
	"brightfold/internal/volume"
)

func demoCLI(args ...string) (int, string, string) {
	var out, errb bytes.Buffer
	code := run(args, &env{stdout: &out, stderr: &errb})
	return code, out.String(), errb.String()
}

func TestDemoCohortUsage(t *testing.T) {
	dir := t.TempDir()
	for _, args := range [][]string{
		{"demo"},
		{"demo", "cohorts", dir},
		{"demo", "cohort"},
		{"demo", "cohort", dir, "--n", "0"},
		{"demo", "cohort", dir, "--n", "x"},
		{"demo", "cohort", dir, "--seed", "-3"},
		{"demo", "cohort", dir, "other"},
	} {
		code, _, stderr := demoCLI(args...)
		if code != 2 || strings.Count(strings.TrimSpace(stderr), "\n") > 1 || strings.Contains(stderr, "goroutine") {
			t.Errorf("%v: exit %d, stderr %q", args, code, stderr)
		}
	}
}

func TestDemoCohortRefusesForeignFolder(t *testing.T) {
	dir := t.TempDir()
	os.WriteFile(filepath.Join(dir, "notes.txt"), []byte("x"), 0o644)
	code, _, stderr := demoCLI("demo", "cohort", dir, "--n", "1")
	if code != 2 || !strings.Contains(stderr, dir) {
		t.Errorf("exit %d, stderr %q", code, stderr)
	}
}

// TestDemoCohortOneCase writes one full-size case and reads it back.
func TestDemoCohortOneCase(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "cohort")
	code, _, stderr := demoCLI("demo", "cohort", dir, "--n", "1", "--seed", "4")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	if !strings.Contains(stderr, notice.Full) || !strings.Contains(stderr, "HMRU-0001") {
		t.Errorf("stderr %q", stderr)
	}
	v, err := volume.Load([]string{filepath.Join(dir, "HMRU-0001", "t1.nii.gz")}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if v.Dims != [3]int{160, 192, 160} || v.Spacing() != [3]float64{1, 1, 1} || v.Affine.Orientation() != "RAS" {
		t.Errorf("dims %v spacing %v orientation %s", v.Dims, v.Spacing(), v.Affine.Orientation())
	}
	for _, p := range []string{"HMRU-0001/mask.nii.gz", "HMRU-0001/dicom/IM0001.dcm", "cohort.csv", "NOTICE.txt"} {
		if _, err := os.Stat(filepath.Join(dir, p)); err != nil {
			t.Error(err)
		}
	}
}
