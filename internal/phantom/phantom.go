// Package phantom makes the synthetic demo cohort of the invented
// "Harbourside Memory Research Unit": T1-weighted-like head phantoms with
// scalp, skull, CSF, grey and white matter, ventricles, deep grey matter and
// small medial temporal structures, built from ellipsoids deformed by smooth
// random fields. Half the cases carry a graded atrophy pattern (wider
// ventricles, thinner temporo-parietal cortex, smaller medial temporal
// structures), and each case records where the pattern changed the anatomy
// as ground truth for relevance maps. Shifted variants (CT-like, T2-like,
// thick slices, cropped field of view, wrong orientation header, heavy noise,
// small head) exercise the out-of-distribution checks.
//
// Everything is deterministic: a case depends only on the cohort seed, its
// index and its shift, so any case can be generated alone and the same seed
// gives the same voxels (on one architecture; see DEVELOPERS.md). The data
// are synthetic and carry no information about any person.
package phantom

import (
	"fmt"

	"brightfold/internal/volume"
)

// Tissue labels one voxel of the phantom anatomy.
type Tissue uint8

// The tissues, outside in.
const (
	Air         Tissue = iota
	Scalp              // skin and subcutaneous fat
	Bone               // inner and outer tables of the skull
	Marrow             // diploë between the tables
	Neck               // soft tissue below the skull
	CSF                // subarachnoid and sulcal cerebrospinal fluid
	Ventricle          // lateral and third ventricles and temporal horns
	GM                 // cortical grey matter
	WM                 // white matter
	DeepGM             // thalamus, lentiform and caudate nuclei
	Hippocampus        // hippocampus-like medial temporal structure
	Amygdala           // amygdala-like medial temporal structure
	numTissues
)

var tissueNames = [numTissues]string{"air", "scalp", "bone", "marrow", "neck", "csf",
	"ventricle", "gm", "wm", "deep_gm", "hippocampus", "amygdala"}

// String is the tissue's short name.
func (t Tissue) String() string {
	if t < numTissues {
		return tissueNames[t]
	}
	return fmt.Sprintf("tissue(%d)", uint8(t))
}

// Tissues lists every tissue label in order.
func Tissues() []Tissue {
	ts := make([]Tissue, numTissues)
	for i := range ts {
		ts[i] = Tissue(i)
	}
	return ts
}

// Mask values: nonzero means the pattern changed the voxel's tissue; the
// value names the structure whose change it is.
const (
	MaskNone           uint8 = 0
	MaskVentricles     uint8 = 1 // ventricular widening
	MaskCortex         uint8 = 2 // cortical thinning and sulcal widening
	MaskMedialTemporal uint8 = 3 // hippocampus and amygdala shrinkage
)

// Options control how a case is rendered.
type Options struct {
	// Shift is the acquisition or anatomy shift (ShiftNone for in-distribution).
	Shift Shift
	// VoxelMM is the in-plane (and, except for ShiftThick, through-plane)
	// voxel size; 0 means 1 mm. Tests use coarser sizes; the field of view
	// stays the same, so the dims shrink.
	VoxelMM float64
	// Workers is the number of goroutines for one case; 0 means one per CPU.
	// The output does not depend on it.
	Workers int
}

func (o Options) voxelMM() float64 {
	if o.VoxelMM <= 0 {
		return 1
	}
	return o.VoxelMM
}

// Case is one generated scan with its ground truth.
type Case struct {
	Subject Subject
	// Volume is the scan: integer-valued intensities (arbitrary MR units, or
	// Hounsfield units for ShiftCT), RAS affine centred on the field of view,
	// metadata and fictional identifiers.
	Volume *volume.Volume
	// Mask holds, on the same grid, where the pattern changed the anatomy
	// (values MaskNone..MaskMedialTemporal); all zero for a negative case.
	Mask *volume.Volume
	// Labels is the tissue of each voxel (the central sub-slice for thick
	// slices), in Volume's voxel order.
	Labels []Tissue
	// VolumesML is the volume of each tissue in millilitres, from Labels.
	VolumesML map[Tissue]float64
}

// Generate makes case index (0-based) of the cohort with the given seed.
func Generate(seed uint64, index int, opts Options) (*Case, error) {
	if index < 0 {
		return nil, fmt.Errorf("phantom: case index %d is negative", index)
	}
	return Render(NewSubject(seed, index, opts.Shift), opts)
}
