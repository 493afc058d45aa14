package volume

import "brightfold/inputerr"

// loadNIfTI reads a NIfTI-1/2 or Analyze file. (Being built.)
func loadNIfTI(path string, opts LoadOptions) (*Volume, error) {
	return nil, inputerr.New(path, "NIfTI reading not built yet")
}
