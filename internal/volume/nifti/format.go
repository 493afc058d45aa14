// Package nifti reads NIfTI-1, NIfTI-2 and Analyze 7.5 files (.nii, .nii.gz,
// .hdr/.img pairs) into volume.Volume with nibabel 5.0's geometry, and writes
// NIfTI-1 with the notice in descrip.
package nifti

import (
	"path/filepath"
	"strings"

	"brightfold/internal/volume"
)

// Format describes NIfTI-1/2 and Analyze 7.5 for volume.RegisterFormat: it
// takes a single path with a NIfTI or Analyze extension (IsPath).
func Format() volume.Format {
	return volume.Format{
		Name:  "nifti",
		Match: func(paths []string) bool { return len(paths) == 1 && IsPath(paths[0]) },
		Load: func(paths []string, opts volume.LoadOptions) (*volume.Volume, error) {
			return loadNIfTI(paths[0], opts)
		},
	}
}

// IsPath reports whether the file name has a NIfTI or Analyze extension.
func IsPath(p string) bool {
	n := strings.ToLower(filepath.Base(p))
	for _, ext := range []string{".nii", ".nii.gz", ".hdr", ".hdr.gz", ".img", ".img.gz"} {
		if strings.HasSuffix(n, ext) {
			return true
		}
	}
	return false
}
