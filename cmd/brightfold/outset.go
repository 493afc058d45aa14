package main

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"

	"golang.org/x/sys/unix"

	"brightfold/internal/inputerr"
	"brightfold/internal/report"
)

// outSet is the folder `score --out DIR` writes, kept whole: the files are
// written into a temporary sibling folder (.DIR.partial-PID-N) and that
// folder replaces DIR in one step (an atomic exchange of the two names,
// renameat2 RENAME_EXCHANGE, on Linux), so DIR always holds either the
// complete new set or the complete old one. Temporary folders left by a
// killed run are removed by the next run.
type outSet struct {
	final, tmp string
}

// resultSetNames are the files of a result set; DIR may hold nothing else.
var resultSetNames = map[string]bool{report.ResultFile: true, report.RelevanceFile: true,
	report.RelevanceSidecar: true, report.OverlayFile: true}

// checkOutDir refuses an output folder that cannot take a result set, before
// anything is computed or written: a file where the folder should be, a
// folder under a set file's name (DIR/result.json/), or files that are not
// part of a result set (they would be replaced with the set).
func checkOutDir(dir string) error {
	st, err := os.Stat(dir)
	if errors.Is(err, os.ErrNotExist) {
		return nil
	}
	if err != nil {
		return inputerr.Wrap(dir, err)
	}
	if !st.IsDir() {
		return inputerr.New(dir, "--out: not a folder")
	}
	entries, err := os.ReadDir(dir)
	if err != nil {
		return inputerr.Wrap(dir, fmt.Errorf("--out: %w", err))
	}
	for _, e := range entries {
		name := e.Name()
		switch {
		case staleTemp(name):
		case resultSetNames[name] && !e.Type().IsRegular():
			return inputerr.New(dir, "--out: %s in it is not a regular file; remove it or give another folder", quoteName(name))
		case !resultSetNames[name]:
			return inputerr.New(dir, "--out: holds %s, which is not part of a result set (%s); give an empty or new folder", quoteName(name), report.ResultFile)
		}
	}
	return nil
}

// staleTemp reports whether name is a temporary file an interrupted write
// left inside a result folder (".result.json.tmp123").
func staleTemp(name string) bool {
	for f := range resultSetNames {
		if strings.HasPrefix(name, "."+f+".tmp") {
			return true
		}
	}
	return false
}

// beginOutSet cleans what killed runs left beside dir and makes the
// temporary sibling folder the set is written into.
func beginOutSet(dir string) (*outSet, error) {
	dir = filepath.Clean(dir)
	parent, base := filepath.Dir(dir), filepath.Base(dir)
	if err := os.MkdirAll(parent, 0o755); err != nil {
		return nil, inputerr.Wrap(parent, fmt.Errorf("create output folder: %w", err))
	}
	cleanStale(parent, base)
	prefix := fmt.Sprintf(".%s.partial-%d-", base, os.Getpid())
	tmp, err := os.MkdirTemp(parent, prefix)
	if err != nil {
		return nil, inputerr.Wrap(dir, fmt.Errorf("create output folder: %w", err))
	}
	return &outSet{final: dir, tmp: tmp}, nil
}

// cleanStale removes temporary folders of runs that are no longer alive.
func cleanStale(parent, base string) {
	entries, err := os.ReadDir(parent)
	if err != nil {
		return
	}
	prefix := "." + base + ".partial-"
	for _, e := range entries {
		rest, ok := strings.CutPrefix(e.Name(), prefix)
		if !ok || !e.IsDir() {
			continue
		}
		pid, err := strconv.Atoi(strings.SplitN(rest, "-", 2)[0])
		if err == nil && pid != os.Getpid() && syscall.Kill(pid, 0) == syscall.ESRCH {
			os.RemoveAll(filepath.Join(parent, e.Name()))
		}
	}
}

// commit puts the written set in place of dir in one step and removes the
// old set.
func (s *outSet) commit() error {
	if _, err := os.Lstat(s.final); errors.Is(err, os.ErrNotExist) {
		if err := os.Rename(s.tmp, s.final); err != nil {
			return inputerr.Wrap(s.final, fmt.Errorf("put the result set in place: %w", err))
		}
		return nil
	}
	err := unix.Renameat2(unix.AT_FDCWD, s.tmp, unix.AT_FDCWD, s.final, unix.RENAME_EXCHANGE)
	if err != nil {
		// no atomic exchange on this file system: move the old set aside first
		old := s.tmp + ".old"
		if err := os.Rename(s.final, old); err != nil {
			return inputerr.Wrap(s.final, fmt.Errorf("replace the result set: %w", err))
		}
		if err := os.Rename(s.tmp, s.final); err != nil {
			os.Rename(old, s.final)
			return inputerr.Wrap(s.final, fmt.Errorf("replace the result set: %w", err))
		}
		return os.RemoveAll(old)
	}
	return os.RemoveAll(s.tmp) // now the old set
}

// abort removes the temporary folder.
func (s *outSet) abort() { os.RemoveAll(s.tmp) }
