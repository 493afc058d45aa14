package nifti

import (
	"encoding/binary"
	"math"

	"brightfold/internal/parallel"
)

// voxelDecoder turns stored voxels of one datatype and byte order into
// float32 values after scl_slope/scl_inter (computed in float64, as nibabel's
// get_fdata does, then rounded to float32).
type voxelDecoder struct {
	dt           DataType
	order        binary.ByteOrder
	slope, inter float64
	identity     bool
}

func newVoxelDecoder(h *niftiHeader) *voxelDecoder {
	return &voxelDecoder{dt: h.datatype, order: h.order, slope: h.slope, inter: h.inter,
		identity: h.slope == 1 && h.inter == 0}
}

// decode fills dst from src (len(src) = len(dst) × bytes per voxel), split
// over the available cores for large chunks.
func (d *voxelDecoder) decode(dst []float32, src []byte) {
	if len(dst) < 1<<16 {
		d.decodeRange(dst, src)
		return
	}
	bpv := len(src) / len(dst)
	parallel.Chunks(len(dst), func(lo, hi int) {
		d.decodeRange(dst[lo:hi], src[lo*bpv:hi*bpv])
	})
}

func (d *voxelDecoder) decodeRange(dst []float32, src []byte) {
	switch d.dt {
	case DTUint8:
		src = src[:len(dst)]
		for i := range dst {
			dst[i] = float32(src[i])
		}
	case DTInt8:
		src = src[:len(dst)]
		for i := range dst {
			dst[i] = float32(int8(src[i]))
		}
	case DTInt16, DTUint16:
		decode16(dst, src[:2*len(dst)], d.order == binary.BigEndian, d.dt == DTInt16)
	case DTFloat32:
		src = src[:4*len(dst)]
		if d.order == binary.BigEndian {
			for i := range dst {
				dst[i] = math.Float32frombits(binary.BigEndian.Uint32(src[4*i:]))
			}
		} else {
			for i := range dst {
				dst[i] = math.Float32frombits(binary.LittleEndian.Uint32(src[4*i:]))
			}
		}
	default:
		d.decodeWide(dst, src)
		return
	}
	d.scale(dst)
}

// decode16 converts 16-bit voxels; the loops use the concrete byte orders
// so that the compiler inlines the loads.
func decode16(dst []float32, src []byte, big, signed bool) {
	switch {
	case big && signed:
		for i := range dst {
			dst[i] = float32(int16(binary.BigEndian.Uint16(src[2*i:])))
		}
	case big:
		for i := range dst {
			dst[i] = float32(binary.BigEndian.Uint16(src[2*i:]))
		}
	case signed:
		for i := range dst {
			dst[i] = float32(int16(binary.LittleEndian.Uint16(src[2*i:])))
		}
	default:
		for i := range dst {
			dst[i] = float32(binary.LittleEndian.Uint16(src[2*i:]))
		}
	}
}

// decodeWide handles the 32- and 64-bit integer and float64 types, whose
// values may not be exact in float32, by scaling in float64 first.
func (d *voxelDecoder) decodeWide(dst []float32, src []byte) {
	o := d.order
	s, c := d.slope, d.inter
	for i := range dst {
		var x float64
		switch d.dt {
		case DTInt32:
			x = float64(int32(o.Uint32(src[4*i:])))
		case DTUint32:
			x = float64(o.Uint32(src[4*i:]))
		case DTFloat64:
			x = math.Float64frombits(o.Uint64(src[8*i:]))
		case DTInt64:
			x = float64(int64(o.Uint64(src[8*i:])))
		case DTUint64:
			x = float64(o.Uint64(src[8*i:]))
		}
		dst[i] = float32(x*s + c)
	}
}

// scale applies slope and intercept to values that are exact in float32
// (8- and 16-bit integers) or already float32.
func (d *voxelDecoder) scale(dst []float32) {
	if d.identity {
		return
	}
	s, c := d.slope, d.inter
	for i, x := range dst {
		dst[i] = float32(float64(x)*s + c)
	}
}
