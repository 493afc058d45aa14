package preprocess

import "brightfold/internal/volume"

// GridVolume is the prepared tensor as a volume on the model grid (x
// fastest, the grid's RAS affine, so it lies over the scan in the same
// world), without identifiers or source path: what `brightfold prepare`
// writes and the viewer's "model input" view shows.
func (p *Prepared) GridVolume() *volume.Volume {
	return &volume.Volume{Data: p.Tensor.GridValues(), Dims: p.Transform.GridDims, Affine: p.Transform.GridAffine,
		Meta: volume.Metadata{Format: "nifti"}}
}
