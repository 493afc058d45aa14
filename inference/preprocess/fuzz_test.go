package preprocess_test

import (
	"encoding/binary"
	"math"
	"testing"

	"brightfold/inference/internal/scantest"
	"brightfold/inference/preprocess"
	"brightfold/internal/volume"
)

// FuzzPrepare: any small volume (dims, affine, voxel values from the fuzzer)
// is prepared or refused with an error, never a panic.
func FuzzPrepare(f *testing.F) {
	f.Add(uint8(8), uint8(9), uint8(7), 1.0, 0.0, 1.2, []byte{1, 2, 3, 200, 250, 0, 9})
	f.Add(uint8(1), uint8(1), uint8(40), 0.0, 3.0, 1e-9, []byte{255})
	f.Fuzz(func(t *testing.T, nx, ny, nz uint8, sx, shear, sz float64, vals []byte) {
		dims := [3]int{int(nx%24) + 1, int(ny%24) + 1, int(nz%24) + 1}
		a := volume.Identity()
		a[0][0], a[0][1], a[2][2] = sx, shear, sz
		v := &volume.Volume{Dims: dims, Affine: a, Data: make([]float32, dims[0]*dims[1]*dims[2])}
		for i := range v.Data {
			if len(vals) > 0 {
				k := i % len(vals)
				v.Data[i] = float32(vals[k])
				if k+4 <= len(vals) && vals[k] == 255 {
					v.Data[i] = math.Float32frombits(binary.LittleEndian.Uint32(vals[k:]))
				}
			}
		}
		p := scantest.Spec()
		p.Shape = [3]int{8, 8, 8}
		pr, err := preprocess.Prepare(v, p)
		if err != nil {
			return
		}
		for _, x := range pr.Tensor.Data {
			if math.IsNaN(float64(x)) || math.IsInf(float64(x), 0) {
				t.Fatalf("non-finite tensor value from dims %v affine %v", dims, a)
			}
		}
	})
}
