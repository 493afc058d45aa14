package inference

import (
	"bytes"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/inference/preprocess"
	"brightfold/internal/volume/nifti"
)

// TestTemplateFileSHA256: WriteModelFolderFiles puts the template beside
// the card, the card's template_sha256 (FileSHA256, crypto/sha256 of
// FIPS 180-4) is checked on load, the loaded card keeps the file's bytes
// for a derived folder, and a different file or a malformed sha256 is
// refused naming the field.
func TestTemplateFileSHA256(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "t.nii.gz")
	tpl := syntheticHead(rand.New(rand.NewPCG(3, 4)), [3]float64{18, 22, 17}, 3)
	if err := nifti.Write(p, tpl, nifti.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	model := readTiny(t)
	card := tinyCard(model)
	card.Preprocessing.Alignment = &preprocess.Alignment{Method: preprocess.AlignRigid, Template: "template.nii.gz", TemplateSHA256: FileSHA256(b)}
	mf := filepath.Join(dir, "mf")
	if err := WriteModelFolderFiles(mf, card, model, map[string][]byte{"template.nii.gz": b}); err != nil {
		t.Fatal(err)
	}
	f, err := LoadModelFolder(mf)
	if err != nil {
		t.Fatal(err)
	}
	if got := f.Card.AlignmentFileBytes()["template.nii.gz"]; !bytes.Equal(got, b) {
		t.Fatalf("loaded card keeps %d template bytes, the file has %d", len(got), len(b))
	}
	b[len(b)-9] ^= 1 // inside the gzip trailer's CRC: the file changes, its sha256 too
	if err := os.WriteFile(filepath.Join(mf, "template.nii.gz"), b, 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := LoadModelFolder(mf); err == nil || !strings.Contains(err.Error(), "does not match the card") {
		t.Fatalf("changed template: got %v", err)
	}
	card.Preprocessing.Alignment.TemplateSHA256 = "ABC"
	if err := WriteModelFolderFiles(filepath.Join(dir, "bad"), card, model, nil); err == nil || !strings.Contains(err.Error(), "template_sha256") {
		t.Fatalf("malformed sha256: got %v", err)
	}
	if err := WriteModelFolderFiles(filepath.Join(dir, "bad2"), card, model, map[string][]byte{"../x": b}); err == nil {
		t.Fatal("a file name outside the folder was accepted")
	}
}
