package main

import (
	"encoding/json"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"brightfold/internal/refcheck"
	"brightfold/internal/report"
)

// TestScoreOutSurvivesSIGKILL kills `score --map lrp --out DIR` with SIGKILL
// at random moments, 30 times, alternating two scans into the same DIR (one
// that gets a map, one that cannot be prepared and gets none). After every
// kill DIR is a whole set: absent, or result.json with exactly the files it
// names, the relevance sidecar agreeing with it, and no temporary file under
// a final name. A last complete run leaves no temporary folder behind.
func TestScoreOutSurvivesSIGKILL(t *testing.T) {
	lib := refcheck.ORTLib(t)
	base := t.TempDir()
	head := headNIfTI(t)
	flat := filepath.Join(base, "flat.nii")
	os.WriteFile(flat, flatNIfTI(t), 0o644)
	out := filepath.Join(base, "set")
	args := func(scan string) []string {
		return []string{"score", scan, "--map", "lrp", "--out", out, "--ort-lib", lib}
	}
	// one complete run gives the time scale of the kills
	t0 := time.Now()
	if err := cliCommand(t, args(head)...).Run(); err != nil {
		t.Fatal(err)
	}
	full := time.Since(t0)
	rng := rand.New(rand.NewPCG(12, 34))
	kills := 0
	for i := range 30 {
		scan := head
		if i%2 == 1 {
			scan = flat
		}
		c := cliCommand(t, args(scan)...)
		if err := c.Start(); err != nil {
			t.Fatal(err)
		}
		delay := time.Duration(rng.Float64() * float64(full))
		timer := time.AfterFunc(delay, func() { c.Process.Signal(syscall.SIGKILL) })
		err := c.Wait()
		timer.Stop()
		if ws, ok := c.ProcessState.Sys().(syscall.WaitStatus); ok && ws.Signaled() {
			kills++
		} else if err != nil {
			t.Fatalf("trial %d: %v", i, err)
		}
		checkWholeSet(t, i, out)
	}
	if err := cliCommand(t, args(head)...).Run(); err != nil {
		t.Fatal(err)
	}
	checkWholeSet(t, 30, out)
	entries, _ := os.ReadDir(base)
	for _, e := range entries {
		if strings.Contains(e.Name(), ".partial-") {
			t.Errorf("temporary folder %s left after a complete run", e.Name())
		}
	}
	t.Logf("30 trials, %d killed (run time %v); every folder a whole set", kills, full.Round(time.Millisecond))
}

// checkWholeSet checks that dir is absent or one complete result set.
func checkWholeSet(t *testing.T, trial int, dir string) {
	t.Helper()
	entries, err := os.ReadDir(dir)
	if os.IsNotExist(err) {
		return
	}
	names := map[string]bool{}
	for _, e := range entries {
		names[e.Name()] = true
		if strings.HasPrefix(e.Name(), ".") {
			t.Errorf("trial %d: temporary %s inside the set", trial, e.Name())
		}
	}
	var res struct {
		Prediction *struct{ Probabilities map[string]float64 }
		Relevance  map[string]any
	}
	b, err := os.ReadFile(filepath.Join(dir, report.ResultFile))
	if err != nil || json.Unmarshal(b, &res) != nil {
		t.Errorf("trial %d: set without a readable result.json (%v): %v", trial, err, names)
		return
	}
	maps := []string{report.RelevanceFile, report.RelevanceSidecar, report.OverlayFile}
	if res.Relevance["problem"] != nil {
		for _, m := range maps {
			if names[m] {
				t.Errorf("trial %d: result.json says no map, but %s is there (mixed sets)", trial, m)
			}
		}
		return
	}
	for _, m := range maps {
		if !names[m] {
			t.Errorf("trial %d: result.json names a map, %s missing", trial, m)
		}
	}
	var side struct {
		TargetClass string  `json:"target_class"`
		Probability float64 `json:"probability"`
	}
	sb, _ := os.ReadFile(filepath.Join(dir, report.RelevanceSidecar))
	json.Unmarshal(sb, &side)
	if res.Prediction == nil || res.Prediction.Probabilities[side.TargetClass] != side.Probability {
		t.Errorf("trial %d: relevance.json (%s %.6g) does not belong to result.json", trial, side.TargetClass, side.Probability)
	}
}
