// Package refcheck helps tests compare Brightfold with outside references
// (Debian's python3-nibabel, python3-pydicom, python3-sklearn, python3-scipy,
// libonnx-testdata, the ONNX Runtime library). A missing reference skips the
// test locally but fails it when BRIGHTFOLD_REQUIRE_REFERENCE=1 (as in CI).
package refcheck

import (
	"bytes"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"testing"
)

// Python is Debian's interpreter, which has the reference packages.
const Python = "/usr/bin/python3"

// Required reports whether missing references must fail tests.
func Required() bool { return os.Getenv("BRIGHTFOLD_REQUIRE_REFERENCE") == "1" }

// Missing skips t, or fails it when references are required.
func Missing(t testing.TB, format string, args ...any) {
	t.Helper()
	if Required() {
		t.Fatalf("reference missing (BRIGHTFOLD_REQUIRE_REFERENCE=1): "+format, args...)
	}
	t.Skipf("reference missing: "+format, args...)
}

// Path returns p if it exists, otherwise calls Missing.
func Path(t testing.TB, p string) string {
	t.Helper()
	if _, err := os.Stat(p); err != nil {
		Missing(t, "%s: %v", p, err)
	}
	return p
}

// PythonModule checks that Debian's Python can import mod.
func PythonModule(t testing.TB, mod string) {
	t.Helper()
	if _, err := os.Stat(Python); err != nil {
		Missing(t, "%s not installed", Python)
	}
	if out, err := exec.Command(Python, "-c", "import "+mod).CombinedOutput(); err != nil {
		Missing(t, "python module %s: %v: %s", mod, err, out)
	}
}

// RunPython runs a Python script file with args under Debian's interpreter
// and decodes its standard output as JSON into out.
func RunPython(t testing.TB, script string, out any, args ...string) {
	t.Helper()
	cmd := exec.Command(Python, append([]string{script}, args...)...)
	var stdout, stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("reference script %s %v: %v\n%s", script, args, err, stderr.String())
	}
	if err := json.Unmarshal(stdout.Bytes(), out); err != nil {
		t.Fatalf("reference script %s: decode output: %v\n%s", script, err, stdout.String())
	}
}

// ORTLib returns the ONNX Runtime library path for tests: BRIGHTFOLD_ORT_LIB,
// else the repository's .cache/onnxruntime folder; Missing when neither exists.
func ORTLib(t testing.TB) string {
	t.Helper()
	if p := os.Getenv("BRIGHTFOLD_ORT_LIB"); p != "" {
		return Path(t, p)
	}
	return Path(t, filepath.Join(RepoRoot(), ".cache", "onnxruntime", "libonnxruntime.so.1"))
}

// RepoRoot is the repository's top folder.
func RepoRoot() string {
	_, file, _, _ := runtime.Caller(0)
	return filepath.Clean(filepath.Join(filepath.Dir(file), "..", ".."))
}
