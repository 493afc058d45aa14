package inference

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"path/filepath"
	"sort"

	"brightfold/internal/atomicfile"
)

// FileSHA256 is the lower-case hex sha256 of b, as the card records the
// files of a model folder.
func FileSHA256(b []byte) string {
	sum := sha256.Sum256(b)
	return hex.EncodeToString(sum[:])
}

// checkFileSHA256 refuses a model-folder file whose bytes do not match the
// card's sha256 (want "" means the card records none).
func checkFileSHA256(name string, b []byte, want string) error {
	if want == "" {
		return nil
	}
	if got := FileSHA256(b); got != want {
		return fmt.Errorf("%s: sha256 %s does not match the card's %s (the file was changed or swapped)", name, got, want)
	}
	return nil
}

// WriteModelFolderFiles is WriteModelFolderDir plus extra files of the
// folder (such as the alignment template), each written atomically; the
// caller makes the whole folder appear at once (model make renames it into
// place). Names must be plain file names.
func WriteModelFolderFiles(dir string, card *Card, model []byte, extra map[string][]byte) error {
	names := make([]string, 0, len(extra))
	for n := range extra {
		if n != filepath.Base(n) || n == ModelFile || n == CardFile {
			return fmt.Errorf("model folder: %q is not a file name the folder may hold", n)
		}
		names = append(names, n)
	}
	sort.Strings(names)
	if err := WriteModelFolderDir(dir, card, model); err != nil {
		return err
	}
	for _, n := range names {
		if err := atomicfile.WriteBytes(filepath.Join(dir, n), extra[n]); err != nil {
			return err
		}
	}
	return nil
}

// AlignmentFileBytes returns the template and mask files of a card loaded
// from a model folder, by name, so that a derived folder (model
// recalibrate) carries them unchanged; nil when the card does not align.
func (c *Card) AlignmentFileBytes() map[string][]byte {
	if c.alignment == nil {
		return nil
	}
	return c.alignment.raw
}
