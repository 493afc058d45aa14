package ortlib

import (
	"debug/elf"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/refcheck"
)

func touch(t *testing.T, p string) {
	t.Helper()
	if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(p, []byte("x"), 0o644); err != nil {
		t.Fatal(err)
	}
}

// The order of Find's doc comment: the flag, then the environment
// variable, then the cache folder searched upwards from the working folder.
func TestFindOrder(t *testing.T) {
	root := t.TempDir()
	flagLib := filepath.Join(root, "flag", FileName)
	envLib := filepath.Join(root, "env", FileName)
	cacheLib := filepath.Join(root, CacheDir, FileName)
	for _, p := range []string{flagLib, envLib, cacheLib} {
		touch(t, p)
	}
	deep := filepath.Join(root, "a", "b", "c")
	if err := os.MkdirAll(deep, 0o755); err != nil {
		t.Fatal(err)
	}
	t.Chdir(deep)
	t.Setenv(EnvVar, envLib)
	for _, c := range []struct{ flag, env, want string }{
		{flagLib, envLib, flagLib},
		{filepath.Dir(flagLib), envLib, flagLib}, // a folder holding the library
		{"", envLib, envLib},
		{"", filepath.Dir(envLib), envLib},
		{"", "", cacheLib}, // three levels up from the working folder
	} {
		t.Setenv(EnvVar, c.env)
		got, err := Find(c.flag)
		if err != nil || got != c.want {
			t.Errorf("Find(%q) with %s=%q: %q, %v; want %q", c.flag, EnvVar, c.env, got, err, c.want)
		}
	}
}

// A flag or variable naming a missing file is an error that says where the
// path came from and how to install the library; it does not fall back to
// another place silently.
func TestFindMissing(t *testing.T) {
	root := t.TempDir()
	touch(t, filepath.Join(root, CacheDir, FileName))
	t.Chdir(root)
	missing := filepath.Join(root, "nowhere", FileName)
	t.Setenv(EnvVar, "")
	if _, err := Find(missing); err == nil || !strings.Contains(err.Error(), "--ort-lib") || !strings.Contains(err.Error(), "make setup") {
		t.Errorf("missing --ort-lib file: %v", err)
	}
	t.Setenv(EnvVar, missing)
	if _, err := Find(""); err == nil || !strings.Contains(err.Error(), EnvVar) || !strings.Contains(err.Error(), missing) {
		t.Errorf("missing %s file: %v", EnvVar, err)
	}
	empty := t.TempDir()
	t.Setenv(EnvVar, filepath.Join(empty))
	if _, err := Find(""); err == nil || !strings.Contains(err.Error(), FileName) {
		t.Errorf("%s folder without the library: %v", EnvVar, err)
	}
}

// With nothing configured and no cache folder above the working folder or
// the test binary, Find reports the library missing with the install hint.
func TestFindNothing(t *testing.T) {
	t.Chdir(t.TempDir())
	t.Setenv(EnvVar, "")
	for _, p := range candidates() {
		if _, err := os.Stat(p); err == nil {
			t.Skipf("a library exists at %s, where this test expects none", p)
		}
	}
	_, err := Find("")
	if err == nil || !strings.Contains(err.Error(), InstallHint) {
		t.Errorf("Find with nothing configured: %v", err)
	}
}

// The library that `make setup` installs is what Find must find: an ELF
// shared object exporting OrtGetApiBase, the entry point of the ONNX Runtime
// C API (onnxruntime_c_api.h), read with the standard library's debug/elf.
func TestFoundLibraryIsORT(t *testing.T) {
	lib := refcheck.ORTLib(t)
	t.Setenv(EnvVar, lib)
	got, err := Find("")
	if err != nil {
		t.Fatal(err)
	}
	f, err := elf.Open(got)
	if err != nil {
		t.Fatalf("%s: %v", got, err)
	}
	defer f.Close()
	if f.Type != elf.ET_DYN {
		t.Errorf("%s: ELF type %v, want a shared object", got, f.Type)
	}
	syms, err := f.DynamicSymbols()
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range syms {
		if s.Name == "OrtGetApiBase" && elf.ST_TYPE(s.Info) == elf.STT_FUNC && s.Section != elf.SHN_UNDEF {
			return
		}
	}
	t.Errorf("%s exports no OrtGetApiBase function", got)
}
