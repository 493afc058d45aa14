// Package formats registers every scan format Brightfold reads with
// volume.Load: NIfTI-1/2 and Analyze first (matched by file name), then
// DICOM (which takes any other input). Import it for its side effect in
// programs and tests that call volume.Load:
//
//	import _ "brightfold/internal/volume/formats"
//
// The codec packages do not register themselves, so the order Load asks
// them in is written here once rather than following package
// initialisation order.
package formats

import (
	"brightfold/internal/volume"
	"brightfold/internal/volume/dicom"
	"brightfold/internal/volume/nifti"
)

func init() {
	volume.RegisterFormat(nifti.Format())
	volume.RegisterFormat(dicom.Format())
}
