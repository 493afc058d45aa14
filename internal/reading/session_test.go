package reading

import (
	"bytes"
	"encoding/csv"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
)

func testCases(n int) []Case {
	var cs []Case
	for i := 0; i < n; i++ {
		cs = append(cs, Case{Name: "HMRU-" + string(rune('A'+i)), Source: "/data/secret/HMRU-" + string(rune('A'+i)) + "/t1.nii.gz", Truth: i % 2})
	}
	return cs
}

func newTestSession(t *testing.T, n int, opts Options) *Session {
	t.Helper()
	if opts.Reader == "" {
		opts.Reader = "R1"
	}
	s, err := Create(filepath.Join(t.TempDir(), "s.bfread"), testCases(n), opts)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

func wantRule(t *testing.T, err error, words string) {
	t.Helper()
	if err == nil || !inputerr.Is(err) || !strings.Contains(err.Error(), words) {
		t.Fatalf("got %v, want an input error about %q", err, words)
	}
}

func TestSequentialRules(t *testing.T) {
	s := newTestSession(t, 6, Options{Seed: 3})
	_, err := s.Record(Read{Code: "C001", Phase: Aided, Rating: 40})
	wantRule(t, err, "unaided read must be locked before the aided")
	err = s.RecordModelOutput(ModelOutput{Code: "C001", ModelSHA256: strings.Repeat("a", 64), Probability: 0.7})
	wantRule(t, err, "only after the unaided read")
	if _, err := s.Record(Read{Code: "C001", Phase: Unaided, Rating: 30, Confidence: 4, Opened: time.Now().Add(-42 * time.Second)}); err != nil {
		t.Fatal(err)
	}
	_, err = s.Record(Read{Code: "C001", Phase: Unaided, Rating: 35})
	wantRule(t, err, "is locked")
	if err := s.RecordModelOutput(ModelOutput{Code: "C001", ModelSHA256: strings.Repeat("a", 64), Probability: 0.7, Verdict: "in distribution"}); err != nil {
		t.Fatal(err)
	}
	if _, err := s.Record(Read{Code: "C001", Phase: Aided, Rating: 60}); err != nil {
		t.Fatal(err)
	}
	if _, err := s.Record(Read{Code: "C001", Phase: Aided, Rating: 65, Amend: true}); err != nil {
		t.Fatal(err)
	}
	_, err = s.Record(Read{Code: "C002", Phase: Unaided, Rating: 65, Amend: true})
	wantRule(t, err, "no unaided read to amend")
	_, err = s.Record(Read{Code: "C999", Phase: Unaided, Rating: 5})
	wantRule(t, err, "no case")
	for _, bad := range []Read{{Code: "C002", Phase: Unaided, Rating: 101}, {Code: "C002", Phase: Unaided, Rating: -1},
		{Code: "C002", Phase: Unaided, Rating: 5, Confidence: 6}, {Code: "C002", Phase: "later", Rating: 5}} {
		_, err := s.Record(bad)
		if !inputerr.Is(err) {
			t.Errorf("%+v: got %v, want an input error", bad, err)
		}
	}
	cur, err := s.CurrentReads()
	if err != nil {
		t.Fatal(err)
	}
	a := cur["C001"][Aided]
	if a.Rating != 65 || a.Amendments != 1 || a.Amends == 0 {
		t.Errorf("aided read after amendment: %+v", a)
	}
	if u := cur["C001"][Unaided]; u.Seconds() < 41 || u.Seconds() > 60 {
		t.Errorf("unaided read took %g s, want about 42", u.Seconds())
	}
	all, _ := s.Reads()
	if len(all) != 3 {
		t.Errorf("%d stored reads, want 3 (the amendment is a new row)", len(all))
	}
}

func TestCrossoverDesign(t *testing.T) {
	s := newTestSession(t, 9, Options{Seed: 5, Design: Crossover, WashoutDays: 14})
	cases, err := s.Cases()
	if err != nil {
		t.Fatal(err)
	}
	aidedFirst := 0
	for _, c := range cases {
		if c.FirstAided {
			aidedFirst++
		}
	}
	if aidedFirst != 4 {
		t.Errorf("%d of 9 cases aided first, want 4 (half, rounded down)", aidedFirst)
	}
	day0 := time.Date(2026, 11, 2, 9, 0, 0, 0, time.UTC)
	var af, uf SessionCase
	for _, c := range cases {
		if c.FirstAided {
			af = c
		} else {
			uf = c
		}
	}
	_, err = s.Record(Read{Code: af.Code, Phase: Unaided, Rating: 20, Locked: day0})
	wantRule(t, err, "first sitting")
	if _, err := s.Record(Read{Code: af.Code, Phase: Aided, Rating: 20, Locked: day0}); err != nil {
		t.Fatal(err)
	}
	if _, err := s.Record(Read{Code: uf.Code, Phase: Unaided, Rating: 20, Locked: day0.Add(time.Hour)}); err != nil {
		t.Fatal(err)
	}
	early, err := s.Record(Read{Code: af.Code, Phase: Unaided, Rating: 30, Locked: day0.Add(5 * 24 * time.Hour)})
	if err != nil {
		t.Fatal(err)
	}
	if early.Sitting != 2 || !strings.Contains(early.Warning, "14-day washout") {
		t.Errorf("second sitting after 5 days: %+v, want a washout warning", early)
	}
	late, err := s.Record(Read{Code: uf.Code, Phase: Aided, Rating: 30, Locked: day0.Add(20 * 24 * time.Hour)})
	if err != nil || late.Warning != "" || late.Sitting != 2 {
		t.Errorf("second sitting after 20 days: %+v, %v; want no warning", late, err)
	}
	tasks, err := s.Worklist()
	if err != nil {
		t.Fatal(err)
	}
	if len(tasks) != 18 || tasks[0].Sitting != 1 || tasks[17].Sitting != 2 {
		t.Errorf("worklist of %d tasks, want 18 in two sittings", len(tasks))
	}
}

func TestShuffleAndCodes(t *testing.T) {
	order := func(seed uint64) string {
		s := newTestSession(t, 12, Options{Seed: seed})
		cs, err := s.Cases()
		if err != nil {
			t.Fatal(err)
		}
		var b strings.Builder
		for _, c := range cs {
			b.WriteString(c.Code + "=" + c.Name + " ")
		}
		return b.String()
	}
	a, b, c := order(1), order(1), order(2)
	if a != b {
		t.Errorf("same seed, different order:\n%s\n%s", a, b)
	}
	if a == c {
		t.Errorf("seeds 1 and 2 gave the same order %s", a)
	}
	// Codes follow the case list, not the order: C001 is always the first name.
	if !strings.Contains(a, "C001=HMRU-A ") || !strings.Contains(c, "C001=HMRU-A ") {
		t.Errorf("codes depend on the seed: %s / %s", a, c)
	}
}

func TestExportHidesIdentifiers(t *testing.T) {
	s := newTestSession(t, 4, Options{Seed: 9})
	for _, code := range []string{"C001", "C002"} {
		if _, err := s.Record(Read{Code: code, Phase: Unaided, Rating: 12.5, Note: "see HMRU-A", Opened: time.Now().Add(-10 * time.Second)}); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := s.Record(Read{Code: "C001", Phase: Aided, Rating: 80, Confidence: 2}); err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if err := s.Export(&buf); err != nil {
		t.Fatal(err)
	}
	out := buf.String()
	for _, secret := range []string{"HMRU", "/data", "secret", ".nii"} {
		if strings.Contains(out, secret) {
			t.Errorf("export contains %q:\n%s", secret, out)
		}
	}
	rows, err := csv.NewReader(strings.NewReader(out)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if strings.Join(rows[0], ",") != "reader,condition,case,truth,rating,confidence,seconds,amended,notice" || len(rows) != 4 {
		t.Fatalf("export:\n%s", out)
	}
	if rows[1][0] != "R1" || rows[1][2] != "C001" || rows[1][3] != "0" || rows[1][8] != notice.Full {
		t.Errorf("first row %v", rows[1])
	}
}

func TestReopenAndIntegrity(t *testing.T) {
	s := newTestSession(t, 3, Options{Seed: 1, Reader: "Dr Reader"})
	if _, err := s.Record(Read{Code: "C002", Phase: Unaided, Rating: 50}); err != nil {
		t.Fatal(err)
	}
	p := s.Path()
	s.Close()
	s2, err := Open(p)
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	if s2.Meta.Reader != "Dr Reader" || s2.Meta.Design != Sequential || s2.Meta.WashoutDays != DefaultWashoutDays {
		t.Errorf("meta %+v", s2.Meta)
	}
	if ok, err := s2.IntegrityCheck(); err != nil || ok != "ok" {
		t.Errorf("integrity check %q, %v", ok, err)
	}
	var mode string
	if err := s2.db.QueryRow("PRAGMA journal_mode").Scan(&mode); err != nil || mode != "wal" {
		t.Errorf("journal mode %q, %v; want wal", mode, err)
	}
}

func TestOpenRefusesOtherFiles(t *testing.T) {
	dir := t.TempDir()
	junk := filepath.Join(dir, "junk.bfread")
	os.WriteFile(junk, []byte("this is not a database at all, not even close........................................................................"), 0o644)
	if _, err := Open(junk); !inputerr.Is(err) {
		t.Errorf("junk file: %v, want an input error", err)
	}
	if _, err := Open(filepath.Join(dir, "missing")); !inputerr.Is(err) {
		t.Errorf("missing file: %v", err)
	}
	if _, err := os.Stat(filepath.Join(dir, "missing")); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("opening a missing session created it")
	}
	other := filepath.Join(dir, "other.db")
	db, err := openDB(other, true)
	if err != nil {
		t.Fatal(err)
	}
	db.Exec("CREATE TABLE t (x)")
	db.Close()
	if _, err := Open(other); err == nil || !strings.Contains(err.Error(), "not a Brightfold session") {
		t.Errorf("other SQLite file: %v", err)
	}
	s := newTestSession(t, 2, Options{})
	if _, err := Create(s.Path(), testCases(2), Options{Reader: "x"}); !inputerr.Is(err) {
		t.Errorf("Create over an existing file: %v", err)
	}
}

func TestNewerSchemaRefused(t *testing.T) {
	s := newTestSession(t, 2, Options{})
	if _, err := s.db.Exec("PRAGMA user_version = 99"); err != nil {
		t.Fatal(err)
	}
	p := s.Path()
	s.Close()
	if _, err := Open(p); err == nil || !strings.Contains(err.Error(), "newer") {
		t.Errorf("schema 99: %v", err)
	}
}
