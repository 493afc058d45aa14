package nifti

import "brightfold/internal/volume"

// The tests here load through volume.Load with this package's format
// registered alone: internal/volume/formats imports this package, so a test
// inside it cannot import formats.
func init() { volume.RegisterFormat(Format()) }
