package inference

import (
	"archive/zip"
	"bytes"
	"testing"
)

// FuzzModelFolderZip: a hostile zip as a model folder gives an error, never a panic.
func FuzzModelFolderZip(f *testing.F) {
	var buf bytes.Buffer
	zw := zip.NewWriter(&buf)
	w, _ := zw.Create("b/card.json")
	cb, _ := MarshalCard(tinyCard([]byte("not a model")))
	w.Write(cb)
	w, _ = zw.Create("b/model.onnx")
	w.Write([]byte("not a model"))
	zw.Close()
	f.Add(buf.Bytes())
	f.Fuzz(func(t *testing.T, b []byte) {
		zr, err := zip.NewReader(bytes.NewReader(b), int64(len(b)))
		if err != nil {
			return
		}
		if _, err := LoadModelFolderFS(zr); err == nil {
			t.Fatal("a fuzzed model folder with a non-matching model was accepted")
		}
	})
}
