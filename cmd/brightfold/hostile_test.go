package main

import (
	"archive/zip"
	"bytes"
	"compress/flate"
	"compress/gzip"
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"brightfold/internal/onnx"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	"brightfold/internal/volume/dicom"
	"brightfold/internal/volume/nifti"
)

// The hostile-input suite: crafted inputs of every class of issue 12 (hangs,
// memory, reads outside a model folder, exit codes, one-line messages,
// inconsistencies), each run as the real command line in a child process
// with a time limit and a memory watch. The rule for every case: exit 0 or
// 2 (as the case says), at most one line on stderr when it exits 2, peak
// resident memory at most 1 GiB, and done within the time limit.

const (
	hostileMemLimit  = 1 << 30 // bytes of peak RSS allowed
	hostileTimeLimit = 60 * time.Second
)

// hostileRun is what one child process did.
type hostileRun struct {
	code           int
	stdout, stderr string
	peakRSS        int64 // bytes (ru_maxrss, or the watch's kill level)
	wall           time.Duration
	killed         string
}

// runHostile runs the CLI with args in a child, killing it when it passes
// the memory limit (watched through /proc every 20 ms) or the time limit.
func runHostile(t *testing.T, dir string, env []string, args ...string) hostileRun {
	t.Helper()
	return runHostileFor(t, hostileTimeLimit, dir, env, args...)
}

// runHostileFor is runHostile with another time limit.
func runHostileFor(t *testing.T, limit time.Duration, dir string, env []string, args ...string) hostileRun {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), limit)
	defer cancel()
	c := cliCommand(t, args...)
	c.Dir = dir
	c.Env = append(c.Env, env...)
	var out, errb bytes.Buffer
	c.Stdout, c.Stderr = &out, &errb
	t0 := time.Now()
	if err := c.Start(); err != nil {
		t.Fatal(err)
	}
	var r hostileRun
	done := make(chan struct{})
	go func() {
		tick := time.NewTicker(20 * time.Millisecond)
		defer tick.Stop()
		for {
			select {
			case <-done:
				return
			case <-ctx.Done():
				r.killed = "time limit"
				c.Process.Kill()
				return
			case <-tick.C:
				if rss := procRSS(c.Process.Pid); rss > hostileMemLimit*5/4 {
					r.killed = fmt.Sprintf("memory %d MiB", rss>>20)
					c.Process.Kill()
					return
				}
			}
		}
	}()
	c.Wait()
	close(done)
	r.wall = time.Since(t0)
	r.code = c.ProcessState.ExitCode()
	if ru, ok := c.ProcessState.SysUsage().(*syscall.Rusage); ok {
		r.peakRSS = ru.Maxrss << 10 // Linux reports KiB
	}
	r.stdout, r.stderr = out.String(), errb.String()
	return r
}

// procRSS is the resident set of pid in bytes (VmRSS in /proc/PID/status).
func procRSS(pid int) int64 {
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/status", pid))
	if err != nil {
		return 0
	}
	for _, line := range strings.Split(string(b), "\n") {
		if f := strings.Fields(line); len(f) >= 2 && f[0] == "VmRSS:" {
			kb, _ := strconv.ParseInt(f[1], 10, 64)
			return kb << 10
		}
	}
	return 0
}

// hostileCase is one crafted input: the command line (relative to the
// fixture folder), the exit code wanted, and text the one line must hold.
type hostileCase struct {
	class, name string
	args        []string
	env         []string
	code        int
	want        string // in stderr (exit 2) or stdout (exit 0)
	check       func(t *testing.T, r hostileRun)
}

func TestHostileInputs(t *testing.T) {
	lib := refcheck.ORTLib(t)
	dir := t.TempDir()
	fx := newHostileFixtures(t, dir)
	cases := append(fx.cases(lib), pydicomBareCases(t)...)
	if len(cases) < 60 {
		t.Fatalf("only %d hostile cases", len(cases))
	}
	var worst hostileRun
	var worstName string
	var slowest time.Duration
	var slowName string
	for _, c := range cases {
		r := runHostile(t, dir, c.env, c.args...)
		name := c.class + "/" + c.name
		if r.killed != "" {
			t.Errorf("%s: killed at the %s\n%s", name, r.killed, r.stderr)
			continue
		}
		lines := strings.Count(strings.TrimRight(r.stderr, "\n"), "\n") + 1
		switch {
		case r.code != c.code:
			t.Errorf("%s: exit %d, want %d\nstderr %q", name, r.code, c.code, r.stderr)
		case c.code == 2 && (lines != 1 || strings.ContainsAny(r.stderr[:len(r.stderr)-1], "\x1b\r\n")):
			t.Errorf("%s: stderr is not one clean line: %q", name, r.stderr)
		case c.code == 2 && c.want != "" && !strings.Contains(r.stderr, c.want):
			t.Errorf("%s: stderr %q lacks %q", name, r.stderr, c.want)
		case c.code == 0 && c.want != "" && !strings.Contains(r.stdout, c.want):
			t.Errorf("%s: stdout lacks %q:\n%s", name, c.want, r.stdout)
		}
		if strings.Contains(r.stderr, "goroutine ") || strings.Contains(r.stderr, "panic") {
			t.Errorf("%s: panic trace", name)
		}
		if r.peakRSS > hostileMemLimit {
			t.Errorf("%s: peak RSS %d MiB > 1 GiB", name, r.peakRSS>>20)
		}
		if c.check != nil {
			c.check(t, r)
		}
		if r.peakRSS > worst.peakRSS {
			worst, worstName = r, name
		}
		if r.wall > slowest {
			slowest, slowName = r.wall, name
		}
	}
	t.Logf("%d hostile cases; peak RSS worst %s: %d MiB (%.1f s); slowest %s: %.1f s",
		len(cases), worstName, worst.peakRSS>>20, worst.wall.Seconds(), slowName, slowest.Seconds())
}

// hostileFixtures are the crafted files, made once in one folder.
type hostileFixtures struct {
	t                *testing.T
	dir, scan, model string
	dicomDir         string
	outsideSHA       string
	loop, emptyLoop  string
	ifExt, mainExt   string
	constShape       string
	expand, rangeBig string
	badOp, mismatch  string
	linkOut, cardOut string
	linkIn           string
}

func newHostileFixtures(t *testing.T, dir string) *hostileFixtures {
	fx := &hostileFixtures{t: t, dir: dir}
	w := func(name string, b []byte) string {
		p := filepath.Join(dir, name)
		os.MkdirAll(filepath.Dir(p), 0o755)
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	fifo := func(name string) {
		p := filepath.Join(dir, name)
		os.MkdirAll(filepath.Dir(p), 0o755)
		if err := syscall.Mkfifo(p, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	// scans
	head := headNIfTI(t)
	raw, _ := os.ReadFile(head)
	fx.scan = w("head.nii.gz", raw)
	w("copy.nii.gz", raw)
	w("padded.nii.gz", append(append([]byte{}, raw...), make([]byte, 4096)...))
	w("garbage.nii.gz", append(append([]byte{}, raw...), []byte("not gzip at all")...))
	w("truncated.nii.gz", raw[:len(raw)/2])
	w("empty.nii", nil)
	os.MkdirAll(filepath.Join(dir, "folder.nii"), 0o755)
	w("flat.nii", flatNIfTI(t))
	// the voxel limit: a small .nii.gz declaring 1024×1024×512 uint8, and a
	// sparse .nii of the same size
	w("huge.nii.gz", hugeNIfTIGz(t))
	sparse := filepath.Join(dir, "sparse.nii")
	w("sparse.nii", hugeHeader(352))
	os.Truncate(sparse, 352+1024*1024*512)
	// named pipes where files are expected
	for _, n := range []string{"fifo.nii", "fifo.nii.gz", "fifo.dcm", "fifo", "fifodir/IM0001.dcm", "pair/x.hdr"} {
		fifo(n)
	}
	w("pairimg/x.hdr", hugeHeader(348)[:348])
	fifo("pairimg/x.img")
	// DICOM
	fx.dicomDir = filepath.Join(dir, "dicom")
	writeSmallSeries(t, fx.dicomDir)
	links := filepath.Join(dir, "dicomlinks")
	os.MkdirAll(filepath.Join(links, "real"), 0o755)
	entries, _ := os.ReadDir(fx.dicomDir)
	for _, e := range entries {
		b, _ := os.ReadFile(filepath.Join(fx.dicomDir, e.Name()))
		os.WriteFile(filepath.Join(links, "real", "."+e.Name()), b, 0o644) // hidden: found only through the links
		os.Symlink(filepath.Join("real", "."+e.Name()), filepath.Join(links, e.Name()))
	}
	outsideLinks := filepath.Join(dir, "dicomoutside")
	os.MkdirAll(outsideLinks, 0o755)
	for _, e := range entries {
		os.Symlink(filepath.Join(fx.dicomDir, e.Name()), filepath.Join(outsideLinks, e.Name()))
	}
	absurd := filepath.Join(dir, "absurd")
	writeSmallSeries(t, absurd)
	setPosition(t, filepath.Join(absurd, "IM0001.dcm"), "-1e308")
	setPosition(t, filepath.Join(absurd, "IM0004.dcm"), "1e308")
	w("deflated.dcm", deflateBomb(t))
	for i := range 4 {
		w(fmt.Sprintf("bombs/b%d.dcm", i), deflateBomb(t))
	}
	// model folders
	fx.model = tinyModelFolder(t)
	mk := func(name string) string {
		p := filepath.Join(dir, name)
		os.MkdirAll(p, 0o755)
		return p
	}
	fm := mk("model-fifo")
	fifo("model-fifo/model.onnx")
	copyFile(t, filepath.Join(fx.model, "card.json"), filepath.Join(fm, "card.json"))
	fc := mk("card-fifo")
	copyFile(t, filepath.Join(fx.model, "model.onnx"), filepath.Join(fc, "model.onnx"))
	fifo("card-fifo/card.json")
	sp := mk("model-sparse")
	copyFile(t, filepath.Join(fx.model, "card.json"), filepath.Join(sp, "card.json"))
	os.WriteFile(filepath.Join(sp, "model.onnx"), nil, 0o644)
	os.Truncate(filepath.Join(sp, "model.onnx"), 1<<30)
	w("zip-declares-huge.zip", zipDeclaring(t, 3<<30, 1))
	w("zip-many.zip", zipDeclaring(t, 100, 20001))
	w("not-a-zip.zip", []byte("PK\x03\x04 but nothing else"))
	// a model folder whose model.onnx and card.json are links out of it
	outside := mk("outside")
	copyFile(t, filepath.Join(fx.model, "model.onnx"), filepath.Join(outside, "model.onnx"))
	copyFile(t, filepath.Join(fx.model, "card.json"), filepath.Join(outside, "card.json"))
	ob, _ := os.ReadFile(filepath.Join(outside, "model.onnx"))
	sum := sha256.Sum256(ob)
	fx.outsideSHA = hex.EncodeToString(sum[:])
	fx.linkOut = mk("model-link-out")
	os.Symlink(filepath.Join(outside, "model.onnx"), filepath.Join(fx.linkOut, "model.onnx"))
	copyFile(t, filepath.Join(fx.model, "card.json"), filepath.Join(fx.linkOut, "card.json"))
	fx.cardOut = mk("card-link-out")
	os.Symlink("../outside/card.json", filepath.Join(fx.cardOut, "card.json"))
	copyFile(t, filepath.Join(fx.model, "model.onnx"), filepath.Join(fx.cardOut, "model.onnx"))
	fx.linkIn = mk("model-link-in")
	os.MkdirAll(filepath.Join(fx.linkIn, "v1"), 0o755)
	copyFile(t, filepath.Join(fx.model, "model.onnx"), filepath.Join(fx.linkIn, "v1", "model.onnx"))
	os.Symlink("v1/model.onnx", filepath.Join(fx.linkIn, "model.onnx"))
	copyFile(t, filepath.Join(fx.model, "card.json"), filepath.Join(fx.linkIn, "card.json"))
	fx.loop = loopModel(t, true)
	fx.emptyLoop = loopModel(t, false)
	fx.ifExt = ifExternalModel(t, false)
	fx.mainExt = ifExternalModel(t, true)
	fx.constShape = bigAllocModel(t, "ConstantOfShape")
	fx.expand = bigAllocModel(t, "Expand")
	fx.rangeBig = bigAllocModel(t, "Range")
	fx.mismatch = mismatchModel(t)
	fx.badOp = hostileModelFolder(t, func(m *onnx.Model) {
		for _, n := range m.Graph.Nodes {
			if n.OpType == "Relu" {
				n.OpType = "NoSuchOperator"
				break
			}
		}
	})
	// output folders
	mk("out-resultdir/result.json")
	w("out-file", []byte("x"))
	w("out-foreign/notes.txt", []byte("mine"))
	// long and strange names
	w("new\nline.nii", []byte("junk"))
	w("\x1b[31mred.nii", []byte("junk"))
	deep := filepath.Join(dir, strings.Repeat("d/", 1000))
	os.MkdirAll(deep, 0o755)
	w(strings.Repeat("n", 250)+".nii", []byte("junk"))
	return fx
}

func (fx *hostileFixtures) cases(lib string) []hostileCase {
	L := []string{"--ort-lib", lib}
	score := func(args ...string) []string { return append(append([]string{"score"}, args...), L...) }
	check := func(m string) []string { return append([]string{"model", "check", m}, L...) }
	budget := []string{"BRIGHTFOLD_RUN_SECONDS=2"}
	noOutside := func(t *testing.T, r hostileRun) {
		if strings.Contains(r.stderr, fx.outsideSHA[:12]) || strings.Contains(r.stderr, "sha256 ") {
			t.Errorf("a refusal printed a hash of a file outside the model folder: %q", r.stderr)
		}
	}
	nothingIn := func(p string) func(t *testing.T, r hostileRun) {
		return func(t *testing.T, r hostileRun) {
			matches, _ := filepath.Glob(filepath.Join(fx.dir, p, "*"))
			for _, m := range matches {
				if filepath.Base(m) != "result.json" && filepath.Base(m) != "notes.txt" {
					t.Errorf("%s written although the command failed", m)
				}
			}
		}
	}
	deepPath := filepath.Join(fx.dir, strings.Repeat("d/", 1000), "x.nii")
	short := func(t *testing.T, r hostileRun) {
		if len(r.stderr) > 800 {
			t.Errorf("message of %d bytes for a deep path", len(r.stderr))
		}
	}
	return []hostileCase{
		// 1. hangs: only regular files are read; every model run has a budget
		{"hang", "inspect FIFO .nii", []string{"inspect", "fifo.nii"}, nil, 2, "named pipe", nil},
		{"hang", "score FIFO .nii", score("fifo.nii"), nil, 2, "named pipe", nil},
		{"hang", "inspect FIFO .nii.gz", []string{"inspect", "fifo.nii.gz"}, nil, 2, "named pipe", nil},
		{"hang", "inspect FIFO .dcm", []string{"inspect", "fifo.dcm"}, nil, 2, "named pipe", nil},
		{"hang", "score FIFO .dcm", score("fifo.dcm"), nil, 2, "named pipe", nil},
		{"hang", "inspect FIFO without extension", []string{"inspect", "fifo"}, nil, 2, "named pipe", nil},
		{"hang", "FIFO in a DICOM folder", []string{"inspect", "fifodir"}, nil, 2, "no files found", nil},
		{"hang", "FIFO as .hdr", []string{"inspect", "pair/x.hdr"}, nil, 2, "named pipe", nil},
		{"hang", "FIFO as the .img of a pair", []string{"inspect", "pairimg/x.hdr"}, nil, 2, "", nil},
		{"hang", "score /dev/zero", score("/dev/zero"), nil, 2, "device", nil},
		{"hang", "inspect /dev/zero", []string{"inspect", "/dev/zero"}, nil, 2, "device", nil},
		{"hang", "score /dev/urandom", score("/dev/urandom"), nil, 2, "device", nil},
		{"hang", "inspect /dev/null", []string{"inspect", "/dev/null"}, nil, 2, "device", nil},
		{"hang", "model.onnx is a FIFO", check("model-fifo"), nil, 2, "regular file", nil},
		{"hang", "card.json is a FIFO", check("card-fifo"), nil, 2, "regular file", nil},
		{"hang", "score with a FIFO model.onnx", score(fx.scan, "--model", "model-fifo"), nil, 2, "regular file", nil},
		{"hang", "model folder /dev/zero", check("/dev/zero"), nil, 2, "", nil},
		{"hang", "Loop of INT64_MAX: model check", check(fx.loop), budget, 2, "BRIGHTFOLD_RUN_SECONDS", nil},
		{"hang", "Loop of INT64_MAX: score", score(fx.scan, "--model", fx.loop), budget, 2, "BRIGHTFOLD_RUN_SECONDS", nil},
		{"hang", "Loop with an empty body", check(fx.emptyLoop), budget, 2, "", nil},
		{"hang", "score --out with a FIFO scan", score("fifo.nii", "--out", "out-fifo"), nil, 2, "named pipe", nothingIn("out-fifo")},
		// 2. memory: limits checked before allocation, named with how to raise them
		{"memory", "nii.gz declaring 1024x1024x512", []string{"inspect", "huge.nii.gz"}, nil, 2, "BRIGHTFOLD_MAX_VOXELS", nil},
		{"memory", "score nii.gz declaring 1024x1024x512", score("huge.nii.gz"), nil, 2, "BRIGHTFOLD_MAX_VOXELS", nil},
		{"memory", "sparse 512 MiB .nii", []string{"inspect", "sparse.nii"}, nil, 2, "BRIGHTFOLD_MAX_VOXELS", nil},
		{"memory", "deflated DICOM bomb", []string{"inspect", "deflated.dcm"}, nil, 2, "limit", nil},
		{"memory", "folder of four deflated bombs", []string{"inspect", "bombs"}, nil, 2, "", nil},
		{"memory", "score a deflated bomb", score("deflated.dcm"), nil, 2, "limit", nil},
		{"memory", "sparse 1 GiB model.onnx", check("model-sparse"), nil, 2, "BRIGHTFOLD_MAX_MODEL_BYTES", nil},
		{"memory", "zip declaring 3 GiB", check("zip-declares-huge.zip"), nil, 2, "BRIGHTFOLD_MAX_MODEL_BYTES", nil},
		{"memory", "zip of 20001 entries", check("zip-many.zip"), nil, 2, "entries", nil},
		{"memory", "broken zip", check("not-a-zip.zip"), nil, 2, "", nil},
		{"memory", "ConstantOfShape of 1.25e9", check(fx.constShape), nil, 2, "ConstantOfShape", nil},
		{"memory", "Expand to 1.25e9", check(fx.expand), nil, 2, "Expand", nil},
		{"memory", "Range of 5 Gi", check(fx.rangeBig), nil, 2, "Range", nil},
		{"memory", "score with a ConstantOfShape model", score(fx.scan, "--model", fx.constShape), nil, 2, "limit", nil},
		// 3. a model folder reads nothing outside itself
		{"outside", "model.onnx links out of the folder", check(fx.linkOut), nil, 2, "", noOutside},
		{"outside", "card.json links out of the folder", check(fx.cardOut), nil, 2, "", noOutside},
		{"outside", "score with model.onnx linked out", score(fx.scan, "--model", fx.linkOut), nil, 2, "", noOutside},
		{"outside", "link inside the folder is followed", check(fx.linkIn), nil, 0, "OK", nil},
		{"outside", "external data in an If branch", check(fx.ifExt), nil, 2, "external data", noOutside},
		{"outside", "external data in a Constant", check(fx.mainExt), nil, 2, "external data", noOutside},
		{"outside", "score with external data in a branch", score(fx.scan, "--model", fx.ifExt), nil, 2, "external data", nil},
		// 4. exit codes
		{"exit", "operator ONNX Runtime lacks", check(fx.badOp), nil, 2, "", nil},
		{"exit", "score with such a model", score(fx.scan, "--model", fx.badOp), nil, 2, "", nil},
		{"exit", "card shape the graph cannot run: model check", check(fx.mismatch), nil, 2, "card's input shape", nil},
		{"exit", "card shape the graph cannot run: score", score(fx.scan, "--model", fx.mismatch), nil, 2, "card's input shape", nil},
		{"exit", "--threads 2000 is bounded", score(fx.scan, "--threads", "2000"), nil, 0, "Fit check", nil},
		{"exit", "--threads -1", score(fx.scan, "--threads", "-1"), nil, 2, "--threads", nil},
		{"exit", "--out holds a folder named result.json", score(fx.scan, "--map", "lrp", "--out", "out-resultdir"), nil, 2, "result.json", nothingIn("out-resultdir")},
		{"exit", "--out is a file", score(fx.scan, "--out", "out-file"), nil, 2, "not a folder", nil},
		{"exit", "--out holds other files", score(fx.scan, "--out", "out-foreign"), nil, 2, "notes.txt", nothingIn("out-foreign")},
		{"exit", "--volume out of range", score(fx.scan, "--volume", "9"), nil, 2, "volume", nil},
		// 6. one line
		{"line", "name with a newline", []string{"inspect", "new\nline.nii"}, nil, 2, `new\nline.nii`, nil},
		{"line", "missing name with a newline", []string{"inspect", "gone\nfile.nii"}, nil, 2, `gone\nfile.nii`, nil},
		{"line", "name with escape codes", []string{"inspect", "\x1b[31mred.nii"}, nil, 2, `\x1b[31mred.nii`, nil},
		{"line", "score name with escape codes", score("\x1b[31mred.nii"), nil, 2, `\x1b`, nil},
		{"line", "unknown option of score", []string{"score", "--bogus", "x"}, nil, 2, "try 'brightfold score --help'", nil},
		{"line", "unknown option of inspect", []string{"inspect", "--frobnicate"}, nil, 2, "try 'brightfold inspect --help'", nil},
		{"line", "unknown option of model check", []string{"model", "check", "--bogus"}, nil, 2, "try 'brightfold model check --help'", nil},
		{"line", "unknown option of demo cohort", []string{"demo", "cohort", "x", "--bogus"}, nil, 2, "--help", nil},
		{"line", "bad option value", []string{"score", "x", "--threads", "many"}, nil, 2, "try 'brightfold score --help'", nil},
		{"line", "inspect ''", []string{"inspect", ""}, nil, 2, `""`, nil},
		{"line", "score ''", score(""), nil, 2, `""`, nil},
		{"line", "1000-deep missing path", []string{"inspect", deepPath}, nil, 2, "…", short},
		{"line", "250-character name", []string{"inspect", strings.Repeat("n", 250) + ".nii"}, nil, 2, "…", short},
		{"line", "unknown command", []string{"frobnicate\x1b[2J"}, nil, 2, `\x1b`, nil},
		{"line", "no doubled prefix", []string{"score"}, nil, 2, "brightfold score:", func(t *testing.T, r hostileRun) {
			if strings.Contains(r.stderr, "brightfold: brightfold") {
				t.Errorf("doubled prefix: %q", r.stderr)
			}
		}},
		// 7. inconsistencies
		{"consistency", "gzip with zero padding", []string{"inspect", "padded.nii.gz"}, nil, 0, "64 × 64 × 64", nil},
		{"consistency", "score gzip with zero padding", score("padded.nii.gz"), nil, 0, "Fit check", nil},
		{"consistency", "gzip with trailing garbage", []string{"inspect", "garbage.nii.gz"}, nil, 2, "garbage", nil},
		{"consistency", "truncated gzip", []string{"inspect", "truncated.nii.gz"}, nil, 2, "", nil},
		{"consistency", "empty .nii", []string{"inspect", "empty.nii"}, nil, 2, "", nil},
		{"consistency", "folder named .nii", []string{"inspect", "folder.nii"}, nil, 2, "", nil},
		{"consistency", "folder of linked DICOM files", []string{"inspect", "dicomlinks"}, nil, 0, "DICOM", nil},
		{"consistency", "links leaving a DICOM folder are skipped", []string{"inspect", "dicomoutside"}, nil, 2, "no files found", nil},
		{"consistency", "score a.nii a.nii", score(fx.scan, fx.scan), nil, 0, "Fit check", nil},
		{"consistency", "score two different NIfTI files", score("head.nii.gz", "copy.nii.gz"), nil, 2, "alone", nil},
		{"consistency", "slice positions of ±1e308", []string{"inspect", "absurd"}, nil, 2, "implausible", nil},
		{"consistency", "unpreparable scan with --map", score("flat.nii", "--map", "lrp", "--out", "out-flat"), nil, 0, "could not be prepared", func(t *testing.T, r hostileRun) {
			b, err := os.ReadFile(filepath.Join(fx.dir, "out-flat", "result.json"))
			if err != nil || !strings.Contains(string(b), `"problem"`) || !strings.Contains(string(b), "out-of-distribution") {
				t.Errorf("unpreparable scan: result.json %s %v", b, err)
			}
		}},
		{"consistency", "unpreparable scan without --map", score("flat.nii"), nil, 0, "OUT-OF-DISTRIBUTION", nil},
	}
}

func copyFile(t *testing.T, from, to string) {
	t.Helper()
	b, err := os.ReadFile(from)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(to, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

// hugeHeader is a NIfTI-1 single-file header (NIfTI-1 nifti1.h: sizeof_hdr
// 348, dim, datatype 2 = uint8, bitpix 8, vox_offset 352, magic "n+1")
// declaring 1024×1024×512 voxels, padded to n bytes.
func hugeHeader(n int) []byte {
	h := make([]byte, max(n, 352))
	le := binary.LittleEndian
	le.PutUint32(h[0:], 348)
	for i, d := range []int16{3, 1024, 1024, 512, 1, 1, 1, 1} {
		le.PutUint16(h[40+2*i:], uint16(d))
	}
	le.PutUint16(h[70:], 2)
	le.PutUint16(h[72:], 8)
	for i := range 4 {
		le.PutUint32(h[76+4*i:], 0x3f800000) // pixdim 1.0
	}
	le.PutUint32(h[108:], 0x43b00000) // vox_offset 352.0
	copy(h[344:], "n+1\x00")
	return h
}

// hugeNIfTIGz is hugeHeader and 512 MiB of zeros, gzipped (about 0.5 MB).
func hugeNIfTIGz(t *testing.T) []byte {
	var buf bytes.Buffer
	zw := gzip.NewWriter(&buf)
	zw.Write(hugeHeader(352))
	zeros := make([]byte, 1<<20)
	for range 512 {
		zw.Write(zeros)
	}
	zw.Close()
	return buf.Bytes()
}

// flatNIfTI is a 32³ scan of one value: no head can be found in it.
func flatNIfTI(t *testing.T) []byte {
	v, _ := volume.New([3]int{32, 32, 32}, volume.Diag([3]float64{1, 1, 1}, [3]float64{-16, -16, -16}))
	for i := range v.Data {
		v.Data[i] = 7
	}
	p := filepath.Join(t.TempDir(), "flat.nii")
	if err := nifti.Write(p, v, nifti.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	b, _ := os.ReadFile(p)
	return b
}

// writeSmallSeries writes a 16×16×4 MR series.
func writeSmallSeries(t *testing.T, dir string) {
	v, _ := volume.New([3]int{16, 16, 4}, volume.Diag([3]float64{1, 1, 2}, [3]float64{-123.25, -123.25, -123.25}))
	for i := range v.Data {
		v.Data[i] = float32(i % 97)
	}
	if err := dicom.WriteSeries(dir, v, dicom.WriteOptions{Seed: "HOSTILE/" + filepath.Base(dir)}); err != nil {
		t.Fatal(err)
	}
}

// setPosition rewrites the z of ImagePositionPatient (0020,0032), explicit
// VR little endian "DS", keeping the value's length.
func setPosition(t *testing.T, p, z string) {
	b, _ := os.ReadFile(p)
	i := bytes.Index(b, []byte{0x20, 0x00, 0x32, 0x00, 'D', 'S'})
	if i < 0 {
		t.Fatal("no ImagePositionPatient")
	}
	n := int(binary.LittleEndian.Uint16(b[i+6:]))
	val := "-123.25\\-123.25\\" + z
	if len(val) > n {
		t.Fatalf("position value %q longer than %d", val, n)
	}
	copy(b[i+8:i+8+n], val+strings.Repeat(" ", n-len(val)))
	os.WriteFile(p, b, 0o644)
}

// deflateBomb is a Deflated Explicit VR Little Endian file (transfer
// syntax 1.2.840.10008.1.2.1.99, DICOM PS3.5 A.5) whose data set is 400 MiB
// of zeros deflated to about 400 KB.
func deflateBomb(t *testing.T) []byte {
	elem := func(g, e uint16, vr string, v []byte) []byte {
		if len(v)%2 == 1 {
			v = append(v, 0)
		}
		b := binary.LittleEndian.AppendUint16(nil, g)
		b = binary.LittleEndian.AppendUint16(b, e)
		b = append(b, vr...)
		if vr == "OB" {
			b = append(b, 0, 0)
			b = binary.LittleEndian.AppendUint32(b, uint32(len(v)))
		} else {
			b = binary.LittleEndian.AppendUint16(b, uint16(len(v)))
		}
		return append(b, v...)
	}
	meta := elem(2, 1, "OB", []byte{0, 1})
	meta = append(meta, elem(2, 2, "UI", []byte("1.2.840.10008.5.1.4.1.1.4"))...)
	meta = append(meta, elem(2, 3, "UI", []byte("1.2.3.4"))...)
	meta = append(meta, elem(2, 0x10, "UI", []byte("1.2.840.10008.1.2.1.99"))...)
	gl := elem(2, 0, "UL", binary.LittleEndian.AppendUint32(nil, uint32(len(meta))))
	out := append(make([]byte, 128), "DICM"...)
	out = append(append(out, gl...), meta...)
	var buf bytes.Buffer
	fw, _ := flate.NewWriter(&buf, flate.BestCompression)
	zeros := make([]byte, 1<<20)
	for range 400 {
		fw.Write(zeros)
	}
	fw.Close()
	return append(out, buf.Bytes()...)
}

// zipDeclaring is a zip whose model.onnx declares size bytes (raw entry
// with a made-up size), plus entries-1 empty files.
func zipDeclaring(t *testing.T, size uint64, entries int) []byte {
	var buf bytes.Buffer
	zw := zip.NewWriter(&buf)
	for i := 1; i < entries; i++ {
		zw.CreateHeader(&zip.FileHeader{Name: fmt.Sprintf("f%d", i), Method: zip.Store})
	}
	zw.CreateHeader(&zip.FileHeader{Name: "card.json", Method: zip.Store})
	w, err := zw.CreateRaw(&zip.FileHeader{Name: "model.onnx", Method: zip.Deflate, CompressedSize64: 2, UncompressedSize64: size})
	if err != nil {
		t.Fatal(err)
	}
	w.Write([]byte{3, 0})
	zw.Close()
	return buf.Bytes()
}

// pydicomBareCases are pydicom's test files without the PS3.10 preamble
// (no_meta.dcm, rtstruct.dcm). pydicom (the reference, run here) reads them
// only with force=True and finds no PixelData in them; Brightfold refuses
// them with that reason.
func pydicomBareCases(t *testing.T) []hostileCase {
	refcheck.PythonModule(t, "pydicom")
	dir := "/usr/lib/python3/dist-packages/pydicom/data/test_files"
	files := []string{refcheck.Path(t, filepath.Join(dir, "no_meta.dcm")), refcheck.Path(t, filepath.Join(dir, "rtstruct.dcm"))}
	var ref map[string]struct{ Plain, Pixels bool }
	refcheck.RunPython(t, filepath.Join("testdata", "pydicom_force.py"), &ref, files...)
	var cs []hostileCase
	for _, f := range files {
		r := ref[f]
		if r.Plain || r.Pixels {
			t.Fatalf("pydicom reads %s differently than assumed: %+v", f, r)
		}
		cs = append(cs, hostileCase{"consistency", "no preamble: " + filepath.Base(f), []string{"inspect", f}, nil, 2, "DICM", nil})
	}
	return cs
}
