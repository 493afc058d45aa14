package atomicfile

import (
	"bytes"
	"errors"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// leftovers lists the folder's entries other than want.
func leftovers(t *testing.T, dir string, want ...string) []string {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	var out []string
	for _, e := range ents {
		keep := false
		for _, w := range want {
			keep = keep || e.Name() == w
		}
		if !keep {
			out = append(out, e.Name())
		}
	}
	return out
}

func TestWriteCreatesAndReplaces(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "out.json")
	for _, data := range [][]byte{[]byte("first"), []byte("second, longer"), {}} {
		if err := WriteBytes(p, data); err != nil {
			t.Fatal(err)
		}
		got, err := os.ReadFile(p)
		if err != nil || !bytes.Equal(got, data) {
			t.Errorf("read back %q, %v; want %q", got, err, data)
		}
		fi, _ := os.Stat(p)
		if fi.Mode().Perm() != 0o644 {
			t.Errorf("mode %v, want 0644", fi.Mode().Perm())
		}
		if l := leftovers(t, dir, "out.json"); len(l) > 0 {
			t.Errorf("temporary files left: %v", l)
		}
	}
}

// A failing fill leaves the old file as it was (or no file) and no
// temporary file, and the error names the target.
func TestWriteFailureKeepsOld(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "keep.txt")
	boom := errors.New("boom")
	if err := Write(p, func(w io.Writer) error { io.WriteString(w, "half"); return boom }); !errors.Is(err, boom) || !strings.Contains(err.Error(), p) {
		t.Errorf("error %v; want boom naming %s", err, p)
	}
	if _, err := os.Stat(p); !os.IsNotExist(err) {
		t.Errorf("a failed first write created the file: %v", err)
	}
	if err := WriteBytes(p, []byte("old")); err != nil {
		t.Fatal(err)
	}
	_ = Write(p, func(w io.Writer) error { io.WriteString(w, "new but half"); return boom })
	if got, _ := os.ReadFile(p); string(got) != "old" {
		t.Errorf("after a failed write the file holds %q, want the old content", got)
	}
	if l := leftovers(t, dir, "keep.txt"); len(l) > 0 {
		t.Errorf("temporary files left: %v", l)
	}
	if err := WriteBytes(filepath.Join(dir, "no", "such", "folder", "f"), []byte("x")); err == nil {
		t.Error("write into a missing folder succeeded")
	}
}

// POSIX rename(2) replaces the name atomically: a reader that opened the
// old file keeps reading the old bytes, a new open sees the new file whole.
func TestReaderSeesOldOrNew(t *testing.T) {
	p := filepath.Join(t.TempDir(), "f")
	if err := WriteBytes(p, []byte("old content")); err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(p)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if err := WriteBytes(p, []byte("new content, replaced")); err != nil {
		t.Fatal(err)
	}
	if got, _ := io.ReadAll(f); string(got) != "old content" {
		t.Errorf("open reader sees %q", got)
	}
	if got, _ := os.ReadFile(p); string(got) != "new content, replaced" {
		t.Errorf("new reader sees %q", got)
	}
}

// The process is killed (SIGKILL, no clean-up runs) while fill is half
// done: the target keeps its old content. The child is this test binary
// re-run in helper mode.
func TestKilledMidWrite(t *testing.T) {
	if p := os.Getenv("ATOMICFILE_HELPER_TARGET"); p != "" {
		_ = Write(p, func(w io.Writer) error {
			io.WriteString(w, "half of the new ")
			if f, ok := w.(*os.File); ok {
				f.Sync()
			}
			os.WriteFile(p+".started", nil, 0o644)
			time.Sleep(time.Minute)
			return nil
		})
		os.Exit(0)
	}
	dir := t.TempDir()
	p := filepath.Join(dir, "target")
	if err := WriteBytes(p, []byte("old")); err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(os.Args[0], "-test.run=^TestKilledMidWrite$")
	cmd.Env = append(os.Environ(), "ATOMICFILE_HELPER_TARGET="+p)
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	deadline := time.Now().Add(30 * time.Second)
	for {
		if _, err := os.Stat(p + ".started"); err == nil {
			break
		}
		if time.Now().After(deadline) {
			cmd.Process.Kill()
			t.Fatal("the helper never started writing")
		}
		time.Sleep(10 * time.Millisecond)
	}
	if err := cmd.Process.Kill(); err != nil {
		t.Fatal(err)
	}
	cmd.Wait()
	if got, _ := os.ReadFile(p); string(got) != "old" {
		t.Errorf("after a kill mid-write the target holds %q, want %q", got, "old")
	}
	// The killed process leaves its temporary file (hidden, named after the
	// target); nothing else reads it.
	for _, l := range leftovers(t, dir, "target", "target.started") {
		if !strings.HasPrefix(l, ".target.tmp") {
			t.Errorf("unexpected file %s", l)
		}
	}
}
