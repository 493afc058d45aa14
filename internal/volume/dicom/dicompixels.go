package dicom

import (
	"encoding/binary"
	"errors"
	"fmt"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"
)

// readPixelBytes parses a file with suyashkumar/dicom, keeping its native
// pixel data as stored bytes, and checks their length against the header.
func readPixelBytes(f *dcmFile, data []byte) ([]byte, error) {
	ds, err := parseWithLibrary(data, dicom.SkipProcessingPixelDataValue())
	if err != nil {
		return nil, fmt.Errorf("read pixel data: %w", err)
	}
	var raw []byte
	found := false
	for _, e := range ds.Elements {
		if e.Tag != tag.PixelData || e.Value == nil || e.Value.ValueType() != dicom.PixelData {
			continue
		}
		info, ok := e.Value.GetValue().(dicom.PixelDataInfo)
		if ok && f.layout.codec != "" && info.IsEncapsulated {
			frags := make([][]byte, len(info.Frames))
			for i, fr := range info.Frames {
				frags[i] = fr.EncapsulatedData.Data
			}
			switch f.layout.codec {
			case codecRLE:
				return f.decodeRLEFrames(frags)
			case codecJPEGLS:
				return f.decodeJPEGFrames(frags, codecJPEGLS, decodeJPEGLS)
			}
			return f.decodeJPEGFrames(frags, codecJPEGLossless, decodeLosslessJPEG)
		}
		if !ok || !info.IntentionallyUnprocessed {
			return nil, errors.New("pixel data is not native (uncompressed)")
		}
		raw, found = info.UnprocessedValueData, true
		break
	}
	if !found {
		return nil, errNoPixelData
	}
	if need := f.pixelBytes(); int64(len(raw)) < need {
		return nil, fmt.Errorf("pixel data holds %d bytes, Rows %d × Columns %d × %d frame(s) × %d bits need %d",
			len(raw), f.rows, f.cols, f.frames, f.bitsAllocated, need)
	}
	return raw, nil
}

// excessPadding reports pixel data longer than the image needs by more
// than the one byte that pads it to even length (PS3.5 7.1.1).
func (f *dcmFile) excessPadding(n int) int64 {
	extra := int64(n) - f.pixelBytes()
	if extra <= 1 {
		return 0
	}
	return extra
}

// decodeFrame writes frame fr of the stored pixels into dst (rows × columns
// values, row by row) after the rescale value = stored × slope + intercept
// (PS3.3 C.11.1.1.2). Stored values keep their BitsStored low bits, sign-
// extended when PixelRepresentation is 1 (PS3.3 C.7.6.3.1, PS3.5 8.1.1);
// BitsAllocated 1 packs pixels least significant bit first across frames
// (PS3.5 8.1.1).
func (f *dcmFile) decodeFrame(raw []byte, fr dcmFrame, dst []float32) {
	n := f.rows * f.cols
	slope, inter := fr.slope, fr.intercept
	var bo binary.ByteOrder = binary.LittleEndian
	if f.layout.bigEndian {
		bo = binary.BigEndian
	}
	unused := uint(f.bitsAllocated - f.bitsStored)
	switch f.bitsAllocated {
	case 1:
		base := fr.index * n
		for p := 0; p < n; p++ {
			b := base + p
			dst[p] = float32(float64((raw[b>>3]>>(b&7))&1)*slope + inter)
		}
	case 8:
		src := raw[fr.index*n : (fr.index+1)*n]
		for p, u := range src {
			dst[p] = float32(dcmStoredValue(uint32(u), 8, unused, f.signed)*slope + inter)
		}
	case 16:
		src := raw[2*fr.index*n : 2*(fr.index+1)*n]
		if unused == 0 {
			dcmDecode16(src, bo, f.signed, slope, inter, dst)
			return
		}
		for p := 0; p < n; p++ {
			dst[p] = float32(dcmStoredValue(uint32(bo.Uint16(src[2*p:])), 16, unused, f.signed)*slope + inter)
		}
	case 32:
		src := raw[4*fr.index*n : 4*(fr.index+1)*n]
		for p := 0; p < n; p++ {
			dst[p] = float32(dcmStoredValue(bo.Uint32(src[4*p:]), 32, unused, f.signed)*slope + inter)
		}
	}
}

// dcmDecode16 is the common case of 16 stored bits, without masking.
func dcmDecode16(src []byte, bo binary.ByteOrder, signed bool, slope, inter float64, dst []float32) {
	src = src[:2*len(dst)]
	switch {
	case signed && slope == 1 && inter == 0:
		for p := range dst {
			dst[p] = float32(int16(bo.Uint16(src[2*p:])))
		}
	case signed:
		for p := range dst {
			dst[p] = float32(float64(int16(bo.Uint16(src[2*p:])))*slope + inter)
		}
	default:
		for p := range dst {
			dst[p] = float32(float64(bo.Uint16(src[2*p:]))*slope + inter)
		}
	}
}

// dcmStoredValue keeps the low bits-unused bits of a bits-wide sample u,
// sign-extending them when signed.
func dcmStoredValue(u uint32, bits int, unused uint, signed bool) float64 {
	shift := unused + uint(32-bits)
	if signed {
		return float64(int32(u<<shift) >> shift)
	}
	return float64((u << shift) >> shift)
}
