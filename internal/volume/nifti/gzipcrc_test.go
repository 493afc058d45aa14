package nifti

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/inputerr"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

// A gzip member's CRC-32 (RFC 1952 section 2.3.1) is checked however much
// decompressed data follows the image: here 65 MiB of zeros follow a 4×4×4
// image inside the member, and the CRC is wrong. Python's gzip module
// refuses the file (the reference); so must the loader. The same file with
// its CRC intact loads.
func TestNIfTIGzipCRCFarAfterImage(t *testing.T) {
	refcheck.PythonModule(t, "gzip")
	raw := append(niiWithData(niiHeader1(4, 4, 4), 64), make([]byte, 65<<20)...)
	good := niiGzip(raw)
	bad := append([]byte(nil), good...)
	bad[len(bad)-8] ^= 0xff // first byte of the CRC-32 in the trailer
	dir := t.TempDir()
	for _, c := range []struct {
		name string
		data []byte
		ok   bool
	}{{"intact.nii.gz", good, true}, {"badcrc.nii.gz", bad, false}} {
		p := filepath.Join(dir, c.name)
		if err := os.WriteFile(p, c.data, 0o644); err != nil {
			t.Fatal(err)
		}
		var ref struct {
			OK    bool
			Error string
		}
		refcheck.RunPython(t, "testdata/gzip_crc.py", &ref, p)
		if ref.OK != c.ok {
			t.Fatalf("%s: Python's gzip says ok=%v (%s); the test file is not what it claims", c.name, ref.OK, ref.Error)
		}
		_, err := volume.Load([]string{p}, volume.LoadOptions{})
		if c.ok && err != nil {
			t.Errorf("%s: %v", c.name, err)
		}
		if !c.ok && (err == nil || !inputerr.Is(err) || !strings.Contains(err.Error(), "gzip")) {
			t.Errorf("%s: loaded (error %v); Python's gzip refuses it: %s", c.name, err, ref.Error)
		}
	}
}
