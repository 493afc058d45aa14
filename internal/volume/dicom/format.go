// Package dicom reads DICOM files and folders into volume.Volume (a
// structure guard before suyashkumar/dicom parses anything, headers, series
// grouping, slice geometry, pixels with the RLE Lossless, JPEG-LS Lossless
// and JPEG Lossless codecs) and writes MR and CT Image Storage series. The
// codecs stay in this package: they serve only DICOM pixel data and share
// one JPEG marker reader.
package dicom

import "brightfold/internal/volume"

// Format describes DICOM for volume.RegisterFormat. DICOM files need no
// extension, so it takes any paths (files and folders, searched
// recursively); register it after the formats that match by name.
func Format() volume.Format {
	return volume.Format{
		Name:  "dicom",
		Match: func([]string) bool { return true },
		Load:  loadDICOM,
	}
}
