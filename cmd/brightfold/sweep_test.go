package main

import (
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strings"
	"syscall"
	"testing"
	"time"

	"brightfold/internal/cohort"
	"brightfold/internal/phantom"
	"brightfold/internal/refcheck"
)

// TestMain lets the test binary stand in for brightfold in child processes
// (the SIGKILL and Slurm tests) when BRIGHTFOLD_TEST_AS_CLI=1.
func TestMain(m *testing.M) {
	if os.Getenv("BRIGHTFOLD_TEST_AS_CLI") == "1" {
		os.Exit(run(os.Args[1:], &env{stdout: os.Stdout, stderr: os.Stderr}))
	}
	os.Exit(m.Run())
}

// cliCommand runs this test binary as brightfold with args.
func cliCommand(t *testing.T, args ...string) *exec.Cmd {
	t.Helper()
	self, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	c := exec.Command(self, args...)
	c.Env = append(os.Environ(), "BRIGHTFOLD_TEST_AS_CLI=1")
	return c
}

func writeSweepBIDS(t *testing.T, n int, mm float64) string {
	t.Helper()
	root := filepath.Join(t.TempDir(), "bids")
	if err := cohort.WritePhantomBIDS(root, phantom.Cohort(3, n, false), mm); err != nil {
		t.Fatal(err)
	}
	return root
}

// treeNoTiming reads every file below dir with result JSON timing left out.
func treeNoTiming(t *testing.T, dir string) map[string]string {
	t.Helper()
	m, err := cohort.ReadOutputs(dir)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

func countResults(dir string) int {
	m, _ := filepath.Glob(filepath.Join(dir, "sub-*", "anat", "*_result.json"))
	return len(m)
}

// TestSweepSIGKILLThenRerun kills a sweep at several moments with SIGKILL,
// runs the same command again, and requires outputs identical to an
// uninterrupted sweep (timing fields aside), temporary files included.
func TestSweepSIGKILLThenRerun(t *testing.T) {
	lib := refcheck.ORTLib(t)
	root := writeSweepBIDS(t, 10, 4)
	ref := filepath.Join(t.TempDir(), "ref")
	if code, _, stderr := runCLI("sweep", root, ref, "--ort-lib", lib, "--threads", "1"); code != 0 {
		t.Fatalf("reference sweep: exit %d: %s", code, stderr)
	}
	want := treeNoTiming(t, ref)
	if len(want) != 13 { // 10 results, dataset_description.json, scores.tsv, scores.json
		t.Fatalf("reference sweep wrote %d files", len(want))
	}
	for _, after := range []int{-1, 2, 6} {
		out := filepath.Join(t.TempDir(), "out")
		c := cliCommand(t, "sweep", root, out, "--ort-lib", lib, "--jobs", "2", "--threads", "1")
		if err := c.Start(); err != nil {
			t.Fatal(err)
		}
		deadline := time.Now().Add(60 * time.Second)
		for after >= 0 && countResults(out) < after && time.Now().Before(deadline) {
			time.Sleep(2 * time.Millisecond)
		}
		if after < 0 {
			time.Sleep(150 * time.Millisecond)
		}
		c.Process.Signal(syscall.SIGKILL)
		c.Wait()
		killedAt := countResults(out)
		if code, _, stderr := runCLI("sweep", root, out, "--ort-lib", lib, "--threads", "1"); code != 0 {
			t.Fatalf("rerun after SIGKILL at %d results: exit %d: %s", killedAt, code, stderr)
		}
		got := treeNoTiming(t, out)
		if !reflect.DeepEqual(got, want) {
			for k := range got {
				if got[k] != want[k] {
					t.Errorf("killed at %d results: %s differs or is extra", killedAt, k)
				}
			}
			for k := range want {
				if _, ok := got[k]; !ok {
					t.Errorf("killed at %d results: %s missing", killedAt, k)
				}
			}
		}
		t.Logf("SIGKILL after %d of 10 results: rerun gave identical outputs", killedAt)
	}
}

// TestSweepGroupRefusesMissing: group names the missing cases and exits 2.
func TestSweepGroupRefusesMissing(t *testing.T) {
	lib := refcheck.ORTLib(t)
	root := writeSweepBIDS(t, 4, 6)
	out := filepath.Join(t.TempDir(), "out")
	if code, _, stderr := runCLI("sweep", root, out, "participant", "--shard", "1/2", "--ort-lib", lib); code != 0 {
		t.Fatalf("shard: exit %d: %s", code, stderr)
	}
	code, _, stderr := runCLI("sweep", root, out, "group")
	if code != 2 || !strings.Contains(stderr, "sub-HMRU0001") || !strings.Contains(stderr, "sub-HMRU0003") || strings.Contains(stderr, "sub-HMRU0002,") {
		t.Errorf("group with shard 0 missing: exit %d: %s", code, stderr)
	}
}

// TestSweepBIDSParticipantThenGroup: a BIDS dataset with participants.tsv
// goes through the participant and group levels of the CLI; the group level
// writes the audit with the notice, and a manifest with --covariates reads
// the covariates from the table.
func TestSweepBIDSParticipantThenGroup(t *testing.T) {
	lib := refcheck.ORTLib(t)
	root := filepath.Join(t.TempDir(), "bids")
	subs := cohort.ConfoundedSubjects(8, map[string][2]int{"site-A": {6, 2}, "site-B": {4, 4}, "site-C": {2, 6}})
	if err := cohort.WritePhantomBIDS(root, subs, 6); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(t.TempDir(), "out")
	for _, level := range []string{"participant", "group"} {
		code, stdout, stderr := runCLI("sweep", root, out, level, "--ort-lib", lib, "--age-bands", "60,75")
		if code != 0 {
			t.Fatalf("%s: exit %d: %s", level, code, stderr)
		}
		if level == "group" && (!strings.Contains(stdout, "AUROC") || !strings.Contains(stdout, "alone")) {
			t.Errorf("group output:\n%s", stdout)
		}
	}
	audit, err := os.ReadFile(filepath.Join(out, cohort.AuditJSON))
	if err != nil || !strings.Contains(string(audit), `"name": "site-A"`) || !strings.Contains(string(audit), `"name": "60-74"`) {
		t.Errorf("audit.json: %v\n%.600s", err, audit)
	}
	// the same cases as a manifest whose covariates come from --covariates
	var csv strings.Builder
	csv.WriteString("participant_id,path,label\n")
	for _, s := range subs {
		id := strings.ReplaceAll(s.ID, "-", "")
		fmt.Fprintf(&csv, "sub-%s,bids/sub-%s/anat/sub-%s_T1w.nii.gz,%d\n", id, id, id, s.Label)
	}
	man := filepath.Join(filepath.Dir(root), "cases.csv")
	os.WriteFile(man, []byte(csv.String()), 0o644)
	out2 := filepath.Join(t.TempDir(), "out2")
	for _, level := range []string{"participant", "group"} {
		if code, _, stderr := runCLI("sweep", man, out2, level, "--ort-lib", lib, "--covariates", filepath.Join(root, "participants.tsv")); code != 0 {
			t.Fatalf("manifest %s: exit %d: %s", level, code, stderr)
		}
	}
	tsv, _ := os.ReadFile(filepath.Join(out2, cohort.ScoresTable))
	if !strings.Contains(string(tsv), "site-A") {
		t.Errorf("scores.tsv of the manifest lacks the covariates:\n%.400s", tsv)
	}
	if code, _, stderr := runCLI("sweep", root, out, "group", "--age-bands", "70,60"); code != 2 || !strings.Contains(stderr, "age-bands") {
		t.Errorf("bad --age-bands: exit %d: %s", code, stderr)
	}
}
