package dicom

import (
	"encoding/binary"
	"errors"
	"fmt"
)

// RLE Lossless (DICOM PS3.5 Annex G): each frame is one fragment holding a
// 64-byte header (the number of segments, then 15 segment offsets, all
// little-endian uint32; G.5) and the segments, each a byte plane of the
// frame compressed with the PackBits scheme of G.3.1. For grey-scale
// images there is one segment per byte of a sample, the most significant
// byte first (G.2).

// rleMaxExpansion bounds how much PackBits output a segment can give per
// input byte: a two-byte replicate run yields at most 128 bytes (G.3.1).
const rleMaxExpansion = 64

// checkRLELength refuses an image whose declared size the compressed
// fragments could not possibly hold, before anything is allocated.
func (f *dcmFile) checkRLELength() error {
	if f.bitsAllocated == 1 {
		return errors.New("RLE Lossless with BitsAllocated 1 is not read")
	}
	if need := f.pixelBytes(); f.layout.fragmentBytes*rleMaxExpansion < need {
		return fmt.Errorf("RLE Lossless fragments hold %d bytes, too few for Rows %d × Columns %d × %d frame(s) × %d bits (%d bytes)",
			f.layout.fragmentBytes, f.rows, f.cols, f.frames, f.bitsAllocated, need)
	}
	return nil
}

// decodeRLEFrames decodes one fragment per frame into the native
// little-endian layout the uncompressed syntaxes use (PS3.5 8.1.1).
func (f *dcmFile) decodeRLEFrames(frags [][]byte) ([]byte, error) {
	if len(frags) != f.frames {
		return nil, fmt.Errorf("RLE Lossless pixel data holds %d fragment(s) for %d frame(s) (PS3.5 A.4.2: one fragment per frame)", len(frags), f.frames)
	}
	return f.decodeFrames(frags, codecRLE, func(frag []byte, bpp int, dst []byte) error {
		return decodeRLEFrame(frag, f.rows*f.cols, bpp, dst)
	})
}

// decodeFrames decodes frame k from frags[k] with decode into its place in
// one buffer of the native little-endian layout.
func (f *dcmFile) decodeFrames(frags [][]byte, codec string, decode func(frag []byte, bpp int, dst []byte) error) ([]byte, error) {
	bpp := f.bitsAllocated / 8
	per := f.rows * f.cols * bpp
	out := make([]byte, per*f.frames)
	for k, frag := range frags {
		if err := decode(frag, bpp, out[k*per:(k+1)*per]); err != nil {
			return nil, fmt.Errorf("%s frame %d: %w", codec, k+1, err)
		}
	}
	return out, nil
}

// decodeRLEFrame decodes one RLE Lossless fragment of n pixels with bpp
// bytes each (one sample per pixel) into dst, little-endian.
func decodeRLEFrame(frag []byte, n, bpp int, dst []byte) error {
	if len(frag) < 64 {
		return fmt.Errorf("fragment of %d bytes is shorter than the 64-byte RLE header (PS3.5 G.5)", len(frag))
	}
	segs := int(binary.LittleEndian.Uint32(frag))
	if segs != bpp {
		return fmt.Errorf("header gives %d segment(s); a grey-scale image of %d bits needs %d (PS3.5 G.2)", segs, 8*bpp, bpp)
	}
	plane := make([]byte, n)
	for s := 0; s < segs; s++ {
		lo := int64(binary.LittleEndian.Uint32(frag[4+4*s:]))
		hi := int64(len(frag))
		if s+1 < segs {
			hi = int64(binary.LittleEndian.Uint32(frag[4+4*(s+1):]))
		}
		if lo < 64 || lo > hi || hi > int64(len(frag)) {
			return fmt.Errorf("segment %d spans bytes %d to %d of a %d-byte fragment", s+1, lo, hi, len(frag))
		}
		if err := unpackBits(frag[lo:hi], plane); err != nil {
			return fmt.Errorf("segment %d: %w", s+1, err)
		}
		b := bpp - 1 - s // segment 1 holds the most significant bytes
		for p, x := range plane {
			dst[p*bpp+b] = x
		}
	}
	return nil
}

// unpackBits decodes a PackBits segment (PS3.5 G.3.1) until dst is full:
// a header byte h in 0..127 copies the next h+1 bytes, h in −127..−1
// repeats the next byte 1−h times, −128 does nothing. Bytes after dst is
// full (the segment's padding to even length) are ignored; a segment that
// ends early is an error.
func unpackBits(seg, dst []byte) error {
	i, o := 0, 0
	for o < len(dst) {
		if i >= len(seg) {
			return fmt.Errorf("ends after %d of %d bytes", o, len(dst))
		}
		h := int8(seg[i])
		i++
		switch {
		case h >= 0:
			m := int(h) + 1
			if i+m > len(seg) {
				return fmt.Errorf("a literal run of %d bytes runs past the segment's end", m)
			}
			if o+m > len(dst) {
				return fmt.Errorf("a literal run of %d bytes overflows the frame", m)
			}
			copy(dst[o:], seg[i:i+m])
			i, o = i+m, o+m
		case h != -128:
			m := 1 - int(h)
			if i >= len(seg) {
				return errors.New("a replicate run has no byte to repeat")
			}
			if o+m > len(dst) {
				return fmt.Errorf("a replicate run of %d bytes overflows the frame", m)
			}
			x := seg[i]
			i++
			for e := o + m; o < e; o++ {
				dst[o] = x
			}
		}
	}
	return nil
}
