package reading

import (
	"io"
	"os"
	"path/filepath"
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
