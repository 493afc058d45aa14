package reading

import (
	"bytes"
	"encoding/json"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"brightfold/internal/inputerr"
)

// FuzzOpenSession: a session file of any bytes opens and exports, or is
// refused with an input error; never a panic or a hang. Seeds are a real
// session file and cuts and flips of it.
func FuzzOpenSession(f *testing.F) {
	dir := f.TempDir()
	p := filepath.Join(dir, "seed.bfread")
	s, err := Create(p, testCases(3), Options{Reader: "R", Seed: 1})
	if err != nil {
		f.Fatal(err)
	}
	s.Record(Read{Code: "C001", Phase: Unaided, Rating: 10, Opened: time.Now()})
	s.Close()
	good, err := os.ReadFile(p)
	if err != nil {
		f.Fatal(err)
	}
	f.Add(good)
	f.Add(good[:len(good)/2])
	flipped := append([]byte(nil), good...)
	flipped[len(flipped)-100] ^= 0xff
	f.Add(flipped)
	f.Add([]byte("SQLite format 3\x00"))
	f.Fuzz(func(t *testing.T, data []byte) {
		p := filepath.Join(t.TempDir(), "f.bfread")
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		s, err := Open(p)
		if err != nil {
			return
		}
		defer s.Close()
		if err := s.Export(io.Discard); err != nil && !inputerr.Is(err) {
			t.Logf("export: %v", err)
		}
		if _, err := s.Worklist(); err != nil && !inputerr.Is(err) {
			t.Logf("worklist: %v", err)
		}
	})
}

// FuzzReadsCSV: any bytes give reads or an input error naming the file, and
// the analysis of what parses ends in a result or an input error, never a panic.
func FuzzReadsCSV(f *testing.F) {
	f.Add([]byte("reader,treatment,case,truth,rating\n1,1,1,0,1\n1,2,1,0,3\n1,1,2,1,4\n1,2,2,1,5\n"))
	f.Add([]byte("reader,condition,case,truth,rating,seconds\nR,aided,C1,1,70,12\nR,unaided,C1,1,20,\nR,aided,C2,0,10,3\nR,unaided,C2,0,40,1\n"))
	f.Add([]byte("reader,condition,case,truth,rating\nA,x,1,1,1e308\nB,x,1,1,-1e308\nA,x,2,0,0\nB,x,2,0,0\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		rows, err := ParseReadsCSV("reads.csv", bytes.NewReader(data))
		if err != nil {
			if !inputerr.Is(err) || !strings.Contains(err.Error(), "reads.csv") {
				t.Fatalf("not an input error naming the file: %v", err)
			}
			return
		}
		if len(rows) > 400 {
			return
		}
		a, err := Analyse(&Reads{Rows: rows}, AnalysisOptions{})
		if err != nil && !inputerr.Is(err) {
			t.Fatalf("analysis: %v", err)
		}
		if err == nil {
			if _, err := json.Marshal(a); err != nil {
				t.Fatalf("JSON: %v", err)
			}
		}
	})
}
