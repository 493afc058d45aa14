package viewer

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// HidePaths hides every path whole and nothing else. The paths are real
// files made by the test, so the file system says what a path is: each
// hidden span must be a path that exists (os.Stat), and the text left must
// be exactly the words around them.
func TestHidePathsWholePathsOnly(t *testing.T) {
	root := t.TempDir()
	mk := func(rel string) string {
		p := filepath.Join(root, rel)
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p, nil, 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	x := mk("Roe Jane 1953/exports/x.png")       // the example: a home folder with spaces
	y := mk("tmp/y")                             // a second, plain path
	z := mk("Harbour side/scans 2026/t1.nii.gz") // two folders with spaces
	const mark = "[path hidden]"
	for _, c := range []struct {
		text  string
		paths []string
		want  string
	}{
		{"Exported " + x + " and " + y, []string{x, y}, "Exported [path hidden] and [path hidden]"},
		{x + " was saved, then " + z + " was read", []string{x, z}, "[path hidden] was saved, then [path hidden] was read"},
		{"Could not open \"" + z + "\": no such file", []string{z}, "Could not open \"[path hidden]\": no such file"},
		{"(" + y + ") " + y, []string{y, y}, "([path hidden]) [path hidden]"},
		{x + "\n" + y, []string{x, y}, "[path hidden]\n[path hidden]"},
		{"file=" + y + ", next", []string{y}, "file=[path hidden], next"},
		// no paths: words with a slash inside, a lone slash, a date
		{"input/bias share 1 / 2 on 2026/12/03", nil, "input/bias share 1 / 2 on 2026/12/03"},
	} {
		got := HidePaths(c.text, mark)
		if got != c.want {
			t.Errorf("HidePaths(%q)\n got %q\nwant %q", c.text, got, c.want)
		}
		// the hidden spans, read back from the input, are the real paths
		var hidden []string
		rest := c.text
		for _, piece := range strings.Split(c.want, mark)[:len(c.paths)] {
			rest = strings.TrimPrefix(rest, piece)
			for _, p := range c.paths {
				if strings.HasPrefix(rest, p) {
					hidden = append(hidden, p)
					rest = rest[len(p):]
					break
				}
			}
		}
		if len(hidden) != len(c.paths) {
			t.Errorf("%q: hidden spans %q, want %q", c.text, hidden, c.paths)
		}
		for _, p := range hidden {
			if _, err := os.Stat(p); err != nil {
				t.Errorf("hidden span %q is no file: %v", p, err)
			}
		}
	}
	// Home-relative and drive-letter paths.
	for in, want := range map[string]string{
		"saved to ~/Brightfold exports/case 01.png now": "saved to [path hidden] 01.png now",
		`read C:\Users\Roe Jane\scan.nii ok`:            "read [path hidden] ok",
	} {
		if got := HidePaths(in, mark); got != want {
			t.Errorf("HidePaths(%q) = %q, want %q", in, got, want)
		}
	}
}

// ElidePath keeps the first folder and the last names that fit, and never
// cuts a name.
func TestElidePath(t *testing.T) {
	p := "/tmp/brightfold-demo/demo/HMRU-0001/dicom"
	for room, want := range map[int]string{
		100: p,
		30:  "/tmp/…/demo/HMRU-0001/dicom",
		22:  "/tmp/…/HMRU-0001/dicom",
		12:  "/tmp/…/dicom",
		3:   "…/dicom",
	} {
		got := ElidePath(p, func(s string) bool { return len([]rune(s)) <= room })
		if got != want {
			t.Errorf("room %d: %q, want %q", room, got, want)
		}
	}
	if got := ElidePath(`C:\Users\Roe\scans\t1.nii`, func(s string) bool { return len([]rune(s)) <= 14 }); got != `C:\…\t1.nii` {
		t.Errorf("drive path: %q", got)
	}
}
