package main

import (
	"encoding/csv"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"brightfold/internal/notice"
	"brightfold/internal/phantom"
	"brightfold/internal/reading"
)

// sessionCohort writes a cohort.csv of n cases (no scans: sessions only list them).
func sessionCohort(t *testing.T, n int) string {
	t.Helper()
	dir := filepath.Join(t.TempDir(), "cohort")
	os.MkdirAll(dir, 0o755)
	var b strings.Builder
	b.WriteString(strings.Join(phantom.CohortColumns(), ",") + "\n")
	for i := 1; i <= n; i++ {
		fmt.Fprintf(&b, "HMRU-%04d,HMRU-%04d/t1.nii.gz,,HMRU-%04d/mask.nii.gz,%d,0.3,66.0,F,north,none,1.0,notice\n", i, i, i, i%2)
	}
	if err := os.WriteFile(filepath.Join(dir, phantom.CohortFile), []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	return dir
}

func mustCLI(t *testing.T, args ...string) string {
	t.Helper()
	code, out, errs := runCLI(args...)
	if code != 0 {
		t.Fatalf("%v: exit %d: %s", args, code, errs)
	}
	return out
}

func TestSessionCommands(t *testing.T) {
	cases := sessionCohort(t, 8)
	file := filepath.Join(t.TempDir(), "r1.bfread")
	mustCLI(t, "session", "new", "--cases", cases, "--reader", "R1", "--out", file, "--seed", "4")
	if code, _, errs := runCLI("session", "new", "--cases", cases, "--reader", "R1", "--out", file); code != 2 || !strings.Contains(errs, file) {
		t.Errorf("new over an existing file: exit %d %s", code, errs)
	}
	code, _, errs := runCLI("session", "record", file, "--case", "C001", "--phase", "aided", "--rating", "70")
	if code != 2 || !strings.Contains(errs, "unaided read must be locked") {
		t.Errorf("aided before unaided: exit %d %s", code, errs)
	}
	mustCLI(t, "session", "record", file, "--case", "C001", "--phase", "unaided", "--rating", "30", "--confidence", "3", "--seconds", "40")
	mustCLI(t, "session", "record", file, "--case", "c001", "--phase", "aided", "--rating", "70", "--note", "cortex")
	if code, _, _ := runCLI("session", "record", file, "--case", "C001", "--phase", "aided", "--rating", "75"); code != 2 {
		t.Errorf("second aided read without --amend: exit %d", code)
	}
	mustCLI(t, "session", "record", file, "--case", "C001", "--phase", "aided", "--rating", "75", "--amend")
	for _, bad := range [][]string{{"--rating", "101"}, {"--rating", "50", "--confidence", "9"}, {"--rating", "x"}} {
		args := append([]string{"session", "record", file, "--case", "C002", "--phase", "unaided"}, bad...)
		if code, _, errs := runCLI(args...); code != 2 || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
			t.Errorf("%v: exit %d %q", bad, code, errs)
		}
	}
	out := filepath.Join(t.TempDir(), "reads.csv")
	mustCLI(t, "session", "export", file, "--out", out)
	b, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	rows, err := csv.NewReader(strings.NewReader(string(b))).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 3 || rows[2][1] != "aided" || rows[2][4] != "75" || rows[2][7] != "1" || rows[1][6] != "40.0" {
		t.Errorf("export rows %v", rows)
	}
	for _, secret := range []string{"HMRU", cases, "t1.nii"} {
		if strings.Contains(string(b), secret) {
			t.Errorf("export contains %q", secret)
		}
	}
	if !strings.Contains(string(b), notice.Full) {
		t.Error("export without the notice")
	}
}

// Two readers' sessions with the model's outputs: mrmc runs Obuchowski-Rockette,
// adds the model as a reader, sensitivity and specificity at 50, and the moves.
func TestMRMCOnSessions(t *testing.T) {
	cases := sessionCohort(t, 30)
	rng := rand.New(rand.NewPCG(1, 2))
	var files []string
	for _, reader := range []string{"R1", "R2", "R3"} {
		file := filepath.Join(t.TempDir(), reader+".bfread")
		mustCLI(t, "session", "new", "--cases", cases, "--reader", reader, "--out", file, "--seed", "9")
		s, err := reading.Open(file)
		if err != nil {
			t.Fatal(err)
		}
		list, _ := s.Cases()
		for _, c := range list {
			u := 50 + 30*float64(2*c.Truth-1)*rng.Float64() + 20*rng.NormFloat64()
			u = min(100, max(0, u))
			if _, err := s.Record(reading.Read{Code: c.Code, Phase: reading.Unaided, Rating: float64(int(u)), Opened: time.Now().Add(-30 * time.Second)}); err != nil {
				t.Fatal(err)
			}
			m := min(1, max(0, 0.5+0.4*float64(2*c.Truth-1)*rng.Float64()))
			if err := s.RecordModelOutput(reading.ModelOutput{Code: c.Code, ModelSHA256: strings.Repeat("b", 64), Probability: m}); err != nil {
				t.Fatal(err)
			}
			if _, err := s.Record(reading.Read{Code: c.Code, Phase: reading.Aided, Rating: float64(int((u + 100*m) / 2))}); err != nil {
				t.Fatal(err)
			}
		}
		s.Close()
		files = append(files, file)
	}
	got := mrmcRun(t, files...)
	if got.Test["statistic"] != "F" || len(got.Conditions) != 2 || got.Conditions[0].Name != "aided" {
		t.Errorf("analysis %+v", got)
	}
	if got.Model == nil || got.Model.Cases != 30 || len(got.Readers) != 7 {
		t.Errorf("model alone %+v, %d readers", got.Model, len(got.Readers))
	}
	if len(got.Moves) != 3 || got.Moves[0].Toward+got.Moves[0].Away == 0 || len(got.Threshold) != 6 {
		t.Errorf("moves %+v threshold %+v", got.Moves, got.Threshold)
	}
	one := mrmcRun(t, files[0])
	if one.Test["statistic"] != "z" {
		t.Errorf("one reader: test %v, want the paired DeLong z", one.Test)
	}
}

// The kill test: a `brightfold session record` process is killed with
// SIGKILL at random moments, 100 times. Every read whose command returned 0
// must be in the file, PRAGMA integrity_check must say ok, and export must work.
func TestSessionSurvivesSIGKILL(t *testing.T) {
	if testing.Short() {
		t.Skip("kill test takes about half a minute")
	}
	list := make([]reading.Case, 500)
	for i := range list {
		list[i] = reading.Case{Name: fmt.Sprintf("case-%03d", i), Source: "/nowhere", Truth: i % 2}
	}
	file := filepath.Join(t.TempDir(), "kill.bfread")
	s, err := reading.Create(file, list, reading.Options{Reader: "K", Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	s.Close()
	next := func() (reading.Task, bool) {
		s, err := reading.Open(file)
		if err != nil {
			t.Fatalf("reopen after a kill: %v", err)
		}
		defer s.Close()
		tasks, err := s.Worklist()
		if err != nil {
			t.Fatal(err)
		}
		i := reading.NextTask(tasks)
		if i < 0 {
			return reading.Task{}, false
		}
		return tasks[i], true
	}
	rating := func(code string, p reading.Phase) string {
		return fmt.Sprint((len(code)*7 + int(code[len(code)-1])*3 + len(p)) % 101)
	}
	rng := rand.New(rand.NewPCG(42, 7))
	acked := map[string]string{}
	var runtime time.Duration
	kills, completed := 0, 0
	for kills < 100 {
		task, ok := next()
		if !ok {
			t.Fatalf("ran out of reads after %d kills", kills)
		}
		r := rating(task.Case.Code, task.Phase)
		cmd := cliCommand(t, "session", "record", file, "--case", task.Case.Code, "--phase", string(task.Phase), "--rating", r)
		start := time.Now()
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		var timer *time.Timer
		if completed >= 3 { // the first reads measure how long a command takes
			delay := time.Duration(rng.Float64() * 1.5 * float64(runtime)) // before, during and after the transaction
			timer = time.AfterFunc(delay, func() { cmd.Process.Signal(syscall.SIGKILL) })
		}
		err := cmd.Wait()
		if timer != nil {
			timer.Stop()
		}
		var exit *exec.ExitError
		switch {
		case err == nil:
			acked[task.Case.Code+"/"+string(task.Phase)] = r
			completed++
			if completed <= 3 {
				runtime = max(runtime, time.Since(start))
			}
		case errors.As(err, &exit) && exit.Sys().(syscall.WaitStatus).Signaled():
			kills++
		default:
			t.Fatalf("record %s %s: %v", task.Case.Code, task.Phase, err)
		}
	}
	s, err = reading.Open(file)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	cur, err := s.CurrentReads()
	if err != nil {
		t.Fatal(err)
	}
	stored := 0
	for _, m := range cur {
		stored += len(m)
	}
	for k, r := range acked {
		code, phase, _ := strings.Cut(k, "/")
		got, ok := cur[code][reading.Phase(phase)]
		if !ok || fmt.Sprint(got.Rating) != r {
			t.Errorf("read %s acknowledged with rating %s is missing or changed (%v, %v)", k, r, got.Rating, ok)
		}
	}
	if res, err := s.IntegrityCheck(); err != nil || res != "ok" {
		t.Errorf("integrity check: %q %v", res, err)
	}
	var b strings.Builder
	if err := s.Export(&b); err != nil {
		t.Fatalf("export: %v", err)
	}
	if rows := strings.Count(b.String(), "\n") - 1; rows != stored {
		t.Errorf("export has %d rows, the file %d reads", rows, stored)
	}
	t.Logf("%d SIGKILLs; %d commands returned 0, all %d of their reads in the file; %d reads stored (%d committed by killed commands); integrity_check ok; export %d rows (command time about %v)",
		kills, completed, len(acked), stored, stored-len(acked), stored, runtime)
}
