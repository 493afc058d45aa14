package volume

import "brightfold/inputerr"

// loadDICOM reads one DICOM series from files and folders. (Being built.)
func loadDICOM(paths []string, opts LoadOptions) (*Volume, error) {
	return nil, inputerr.New(paths[0], "DICOM reading not built yet")
}
