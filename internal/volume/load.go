package volume

import (
	"errors"
	"os"
	"sync"

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

// Format is one file format Load can read.
type Format struct {
	// Name is the format's short name, as in Metadata.Format ("nifti", "dicom").
	Name string
	// Match reports whether the format takes these paths (which exist). It
	// looks at names or first bytes only; the formats are asked in
	// registration order and the first match loads.
	Match func(paths []string) bool
	// Load reads one volume from paths.
	Load func(paths []string, opts LoadOptions) (*Volume, error)
}

// registry holds the formats Load dispatches to, in registration order, as
// the standard library's image package keeps its decoders: appended by
// RegisterFormat while programs start, read by Load.
var registry struct {
	sync.RWMutex
	formats []Format
}

// RegisterFormat adds a format for Load, after those registered before it.
// internal/volume/formats registers NIfTI and DICOM; import it (for its side
// effect) in programs that call Load.
func RegisterFormat(f Format) {
	registry.Lock()
	defer registry.Unlock()
	registry.formats = append(registry.formats, f)
}

// Formats returns the names of the registered formats, in the order Load asks them.
func Formats() []string {
	registry.RLock()
	defer registry.RUnlock()
	names := make([]string, len(registry.formats))
	for i, f := range registry.formats {
		names[i] = f.Name
	}
	return names
}

// Load reads one volume from paths with the first registered format that
// matches them: with internal/volume/formats imported, a single NIfTI file
// (.nii, .nii.gz, .hdr/.img pair), or DICOM files and folders (searched
// recursively).
func Load(paths []string, opts LoadOptions) (*Volume, error) {
	if len(paths) == 0 {
		return nil, inputerr.New("", "no input path given")
	}
	paths, err := CheckPaths(paths)
	if err != nil {
		return nil, err
	}
	registry.RLock()
	formats := registry.formats
	registry.RUnlock()
	if err := checkMixed(formats, paths); err != nil {
		return nil, err
	}
	for _, f := range formats {
		if f.Match(paths) {
			return f.Load(paths, opts)
		}
	}
	return nil, inputerr.New(paths[0], "no registered format reads it (registered: %v)", Formats())
}

// CheckPaths checks input paths before any format reads them: each names an
// existing regular file or folder (a named pipe or device is refused by name
// before it is opened), and a path given twice (or two names of one file) is
// kept once. It returns the paths left.
func CheckPaths(paths []string) ([]string, error) {
	var out []string
	var seen []os.FileInfo
	for _, p := range paths {
		if p == "" {
			return nil, inputerr.New("", "the path \"\" is empty; give a file or folder")
		}
		if err := CheckRegular(p, true); err != nil {
			var pe *os.PathError
			if errors.As(err, &pe) {
				err = pe.Err
			}
			return nil, inputerr.Wrap(p, err)
		}
		st, err := os.Stat(p)
		if err != nil {
			return nil, inputerr.Wrap(p, err)
		}
		dup := false
		for _, s := range seen {
			dup = dup || os.SameFile(s, st)
		}
		if !dup {
			seen = append(seen, st)
			out = append(out, p)
		}
	}
	return out, nil
}

// checkMixed refuses several paths when one of them is read by a format that
// takes it only alone (two NIfTI files, or a NIfTI file beside DICOM files).
func checkMixed(formats []Format, paths []string) error {
	if len(paths) < 2 {
		return nil
	}
	for _, p := range paths {
		for _, f := range formats {
			if !f.Match([]string{p}) {
				continue
			}
			if !f.Match(paths) {
				return inputerr.New(p, "a %s file is one scan and is read alone; give it without the other %d path(s)", f.Name, len(paths)-1)
			}
			break
		}
	}
	return nil
}
