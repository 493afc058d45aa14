// Package volume holds the Volume type (voxels, a voxel-index to RAS
// millimetre affine, metadata, and patient identifiers kept apart), the
// affine and 3×3 geometry, reorientation and resampling, and Load, which
// reads a scan through the registered formats (internal/volume/formats
// registers NIfTI and DICOM; the codecs live in internal/volume/nifti and
// internal/volume/dicom).
package volume

import (
	"fmt"
	"math"
)

// Volume is one 3D scalar image. Voxel (i, j, k) is Data[i + Dims[0]*(j + Dims[1]*k)]:
// the first index varies fastest, as in NIfTI.
type Volume struct {
	Data     []float32 // voxel values after rescale (scl_slope/inter, RescaleSlope/Intercept)
	Dims     [3]int
	Affine   Affine // voxel index (i, j, k, 1) to RAS millimetres (x, y, z, 1)
	Meta     Metadata
	Patient  Identifiers // protected health information; never printed unless asked
	Source   string      // path the volume was read from; hidden in meeting mode and exports
	Warnings []string    // problems found while loading that did not stop it
}

// Metadata is the non-identifying description of an acquisition.
type Metadata struct {
	Format            string  `json:"format"`             // "nifti" or "dicom"
	Modality          string  `json:"modality,omitempty"` // DICOM Modality (MR, CT, PT, ...); empty when unknown
	SeriesDescription string  `json:"series_description,omitempty"`
	Manufacturer      string  `json:"manufacturer,omitempty"`
	Site              string  `json:"site,omitempty"`
	FieldStrengthT    float64 `json:"field_strength_t,omitempty"`
	RepetitionTimeMs  float64 `json:"repetition_time_ms,omitempty"`
	EchoTimeMs        float64 `json:"echo_time_ms,omitempty"`
	InversionTimeMs   float64 `json:"inversion_time_ms,omitempty"`
	FlipAngleDeg      float64 `json:"flip_angle_deg,omitempty"`
	SliceThicknessMm  float64 `json:"slice_thickness_mm,omitempty"`
	DataType          string  `json:"data_type,omitempty"`     // stored type, e.g. "int16", "float32"
	NumVolumes        int     `json:"num_volumes,omitempty"`   // frames in a 4D input (1 for 3D)
	VolumeIndex       int     `json:"volume_index"`            // which frame of a 4D input this is
	Description       string  `json:"description,omitempty"`   // NIfTI descrip or DICOM ImageComments
	WindowCenter      float64 `json:"window_center,omitempty"` // the scan's own window (DICOM), 0 when none
	WindowWidth       float64 `json:"window_width,omitempty"`
	SeriesUID         string  `json:"series_uid,omitempty"`
	// TransferSyntax names a DICOM file's transfer syntax (PS3.5 A), e.g.
	// "1.2.840.10008.1.2.4.80 JPEG-LS Lossless Image Compression".
	TransferSyntax string `json:"transfer_syntax,omitempty"`
}

// Identifiers are the patient-identifying fields of a scan. They print as
// "[hidden]" so that a stray %v or JSON encoding cannot leak them; read the
// fields directly when the user has asked to see them.
type Identifiers struct {
	Name, ID, BirthDate, StudyDate, Accession, Institution string
}

// String hides the identifiers.
func (Identifiers) String() string { return "[hidden]" }

// GoString hides the identifiers from %#v too.
func (Identifiers) GoString() string { return "[hidden]" }

// MarshalJSON hides the identifiers from encoding/json.
func (Identifiers) MarshalJSON() ([]byte, error) { return []byte(`"[hidden]"`), nil }

// Empty reports whether no identifier is set.
func (p Identifiers) Empty() bool { return p == Identifiers{} }

// Len is the number of voxels.
func (v *Volume) Len() int { return v.Dims[0] * v.Dims[1] * v.Dims[2] }

// Index returns the offset of voxel (i, j, k) in Data.
func (v *Volume) Index(i, j, k int) int { return i + v.Dims[0]*(j+v.Dims[1]*k) }

// At returns voxel (i, j, k); it does not check bounds.
func (v *Volume) At(i, j, k int) float32 { return v.Data[v.Index(i, j, k)] }

// Spacing is the length in millimetres of one voxel step along each index
// axis (the norms of the affine's first three columns).
func (v *Volume) Spacing() [3]float64 { return v.Affine.Spacing() }

// Stats returns the minimum, maximum and mean of the finite voxel values.
func (v *Volume) Stats() (min, max, mean float64) {
	min, max = math.Inf(1), math.Inf(-1)
	var sum float64
	n := 0
	for _, x := range v.Data {
		f := float64(x)
		if math.IsNaN(f) || math.IsInf(f, 0) {
			continue
		}
		if f < min {
			min = f
		}
		if f > max {
			max = f
		}
		sum += f
		n++
	}
	if n == 0 {
		return math.NaN(), math.NaN(), math.NaN()
	}
	return min, max, sum / float64(n)
}

// New makes a zero-filled volume with the given dims and affine.
// More voxels than VoxelLimit are refused before allocation.
func New(dims [3]int, a Affine) (*Volume, error) {
	if err := CheckVoxels(dims[:]); err != nil {
		return nil, err
	}
	n, err := CheckedProduct(dims[:], MaxVoxels)
	if err != nil {
		return nil, err
	}
	return &Volume{Data: make([]float32, n), Dims: dims, Affine: a}, nil
}

// Clone returns a deep copy of v (warnings and metadata included).
func (v *Volume) Clone() *Volume {
	c := *v
	c.Data = append([]float32(nil), v.Data...)
	c.Warnings = append([]string(nil), v.Warnings...)
	return &c
}

// MaxVoxels bounds the voxels of one volume (2^31, 8 GiB of float32): a header
// that asks for more is refused before anything is allocated.
const MaxVoxels = 1 << 31

// CheckedProduct multiplies dims, refusing a dim below 1 or a product above limit.
func CheckedProduct(dims []int, limit int) (int, error) {
	n := 1
	for _, d := range dims {
		if d < 1 {
			return 0, fmt.Errorf("dimension %d is not positive (dims %v)", d, dims)
		}
		if n > limit/d {
			return 0, fmt.Errorf("dims %v exceed %d voxels", dims, limit)
		}
		n *= d
	}
	return n, nil
}
