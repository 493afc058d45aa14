package nifti

import (
	"bytes"
	"compress/gzip"
	"io"
	"testing"
)

// FuzzGzipMembers feeds arbitrary bytes after a gzip member: the reader must
// never panic, must give the member's bytes when only zeros follow, and must
// refuse anything else that is not a further member.
func FuzzGzipMembers(f *testing.F) {
	var member bytes.Buffer
	zw := gzip.NewWriter(&member)
	zw.Write([]byte("brightfold"))
	zw.Close()
	f.Add([]byte{})
	f.Add(make([]byte, 100))
	f.Add([]byte("garbage"))
	f.Add(member.Bytes())
	f.Fuzz(func(t *testing.T, tail []byte) {
		in := append(append([]byte{}, member.Bytes()...), tail...)
		g, err := newGzipMembers(bytes.NewReader(in), int64(len(in)))
		if err != nil {
			t.Fatal(err)
		}
		out, err := io.ReadAll(io.LimitReader(g, 1<<20))
		if bytes.Count(tail, []byte{0}) == len(tail) {
			if err != nil || string(out) != "brightfold" {
				t.Fatalf("zero padding of %d bytes: %q, %v", len(tail), out, err)
			}
		}
		if err == nil && !bytes.HasPrefix(out, []byte("brightfold")) {
			t.Fatalf("accepted but gave %q", out)
		}
	})
}
