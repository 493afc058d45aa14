package volume

import (
	"os"
	"path/filepath"
	"strings"

	"brightfold/internal/inputerr"
)

// LoadOptions control how scans are read.
type LoadOptions struct {
	// VolumeIndex picks one frame of a 4D NIfTI input (default 0).
	VolumeIndex int
	// SeriesUID picks one series when DICOM input holds several; empty means
	// the only series, or an error listing them when there are several.
	SeriesUID string
}

// Load reads one volume from paths: a single NIfTI file (.nii, .nii.gz,
// .hdr/.img pair), or DICOM files and folders (searched recursively).
func Load(paths []string, opts LoadOptions) (*Volume, error) {
	if len(paths) == 0 {
		return nil, inputerr.New("", "no input path given")
	}
	if len(paths) == 1 && IsNIfTIPath(paths[0]) {
		if _, err := os.Stat(paths[0]); err != nil {
			return nil, inputerr.Wrap(paths[0], err)
		}
		return loadNIfTI(paths[0], opts)
	}
	for _, p := range paths {
		if _, err := os.Stat(p); err != nil {
			return nil, inputerr.Wrap(p, err)
		}
	}
	return loadDICOM(paths, opts)
}

// IsNIfTIPath reports whether the file name has a NIfTI or Analyze extension.
func IsNIfTIPath(p string) bool {
	n := strings.ToLower(filepath.Base(p))
	for _, ext := range []string{".nii", ".nii.gz", ".hdr", ".hdr.gz", ".img", ".img.gz"} {
		if strings.HasSuffix(n, ext) {
			return true
		}
	}
	return false
}
