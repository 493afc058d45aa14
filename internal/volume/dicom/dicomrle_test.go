package dicom

import (
	"bytes"
	"encoding/binary"
	"os"
	"strings"
	"testing"

	"brightfold/internal/refcheck"
)

// A hand-made segment in the PackBits scheme of DICOM PS3.5 G.3.1: header
// 0x02 copies 3 literal bytes, 0xFE (−2) repeats the next byte 3 times,
// 0x80 (−128) is a no-op, 0x00 copies one byte.
func TestUnpackBitsWorkedExample(t *testing.T) {
	seg := []byte{0x02, 'a', 'b', 'c', 0xFE, 'z', 0x80, 0x00, 'q', 0x00 /* padding */}
	dst := make([]byte, 7)
	if err := unpackBits(seg, dst); err != nil {
		t.Fatal(err)
	}
	if string(dst) != "abczzzq" {
		t.Errorf("decoded %q, want %q", dst, "abczzzq")
	}
	// the longest runs: 128 literal bytes (0x7F) and 128 repeats (0x81 = −127)
	long := append([]byte{0x7F}, bytes.Repeat([]byte{7}, 128)...)
	long = append(long, 0x81, 9)
	dst = make([]byte, 256)
	if err := unpackBits(long, dst); err != nil {
		t.Fatal(err)
	}
	if dst[127] != 7 || dst[128] != 9 || dst[255] != 9 {
		t.Errorf("long runs decoded to %v … %v", dst[126:130], dst[254:])
	}
}

// Malformed segments and headers give an error naming the problem, never a
// panic or a frame filled from nowhere.
func TestRLEMalformed(t *testing.T) {
	for _, tc := range []struct {
		name string
		seg  []byte
		want string
	}{
		{"ends early", []byte{0x01, 'a', 'b'}, "ends after 2"},
		{"literal past the end", []byte{0x05, 'a'}, "past the segment"},
		{"literal overflows", []byte{0x05, 'a', 'b', 'c', 'd', 'e', 'f'}, "overflows"},
		{"replicate overflows", []byte{0x81, 'x'}, "overflows"},
		{"replicate without byte", []byte{0xFF}, "no byte"},
	} {
		err := unpackBits(tc.seg, make([]byte, 4))
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: %v, want %q", tc.name, err, tc.want)
		}
	}
	hdr := func(segs uint32, offs ...uint32) []byte {
		b := make([]byte, 64)
		binary.LittleEndian.PutUint32(b, segs)
		for i, o := range offs {
			binary.LittleEndian.PutUint32(b[4+4*i:], o)
		}
		return b
	}
	for _, tc := range []struct {
		name string
		frag []byte
		want string
	}{
		{"short header", make([]byte, 10), "shorter than the 64-byte"},
		{"segment count", hdr(3, 64, 64, 64), "needs 2"},
		{"offset inside the header", append(hdr(2, 8, 66), 0, 0, 0, 0), "spans bytes 8"},
		{"offsets out of order", append(hdr(2, 66, 64), 0, 0, 0, 0), "spans bytes 66 to 64"},
		{"offset past the end", hdr(2, 64, 900), "spans bytes 64 to 900"},
	} {
		err := decodeRLEFrame(tc.frag, 2, 2, make([]byte, 4))
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: %v, want %q", tc.name, err, tc.want)
		}
	}
}

// RLE Lossless and JPEG-LS Lossless files of Debian's python3-pydicom test
// data decode, every frame, to the same pixels as their uncompressed twins
// there (pydicom
// itself finds MR_small_RLE = MR_small and rtdose_rle = rtdose pixel for
// pixel; TestDICOMPixelsMatchPydicom compares the first frames with
// pydicom's own RLE decoder): 16-bit signed, 1 frame; 32-bit, 15 frames.
func TestCompressedMatchesUncompressedTwin(t *testing.T) {
	for _, tc := range []struct{ rle, native string }{
		{"MR_small_RLE.dcm", "MR_small.dcm"},
		{"rtdose_rle.dcm", "rtdose.dcm"},
		{"rtdose_rle_1frame.dcm", "rtdose_1frame.dcm"},
		{"MR_small_jpeg_ls_lossless.dcm", "MR_small.dcm"}, // JPEG-LS Lossless (T.87), 16-bit signed
	} {
		a := dcmAllFrames(t, refcheck.Path(t, dcmPydicomDir+"/"+tc.rle))
		b := dcmAllFrames(t, refcheck.Path(t, dcmPydicomDir+"/"+tc.native))
		if a == nil || b == nil {
			continue
		}
		if len(a) != len(b) {
			t.Errorf("%s: %d values, %s %d", tc.rle, len(a), tc.native, len(b))
			continue
		}
		for i := range a {
			if a[i] != b[i] {
				t.Errorf("%s: value %d = %v, %s %v", tc.rle, i, a[i], tc.native, b[i])
				break
			}
		}
		t.Logf("%s: %d values equal to %s", tc.rle, len(a), tc.native)
	}
}

// dcmAllFrames decodes every frame of one file as loading does.
func dcmAllFrames(t *testing.T, path string) []float32 {
	t.Helper()
	_, f, err := dcmDecodeFile(path)
	if err != nil {
		t.Errorf("%s: %v", path, err)
		return nil
	}
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	raw, err := readPixelBytes(f, data)
	if err != nil {
		t.Errorf("%s: %v", path, err)
		return nil
	}
	n := f.rows * f.cols
	out := make([]float32, n*f.frames)
	for k := 0; k < f.frames; k++ {
		fr := dcmFrame{file: f, index: k, slope: f.slope, intercept: f.intercept}
		if k < len(f.frameGeo) {
			fr = f.frameGeo[k]
		}
		f.decodeFrame(raw, fr, out[k*n:(k+1)*n])
	}
	return out
}

// FuzzRLEFrame feeds arbitrary fragments to the RLE decoder: an error or a
// full frame, never a panic.
func FuzzRLEFrame(f *testing.F) {
	seed := make([]byte, 64)
	binary.LittleEndian.PutUint32(seed, 2)
	binary.LittleEndian.PutUint32(seed[4:], 64)
	binary.LittleEndian.PutUint32(seed[8:], 67)
	seed = append(seed, 0xFD, 1, 0x00, 0x81, 7, 0x02, 1, 2, 3)
	f.Add(seed, uint8(2), uint8(2))
	f.Add([]byte{1, 0, 0, 0}, uint8(1), uint8(1))
	f.Fuzz(func(t *testing.T, frag []byte, pixels, bpp uint8) {
		n, b := int(pixels%64)+1, int(bpp%4)+1
		dst := make([]byte, n*b)
		err := decodeRLEFrame(frag, n, b, dst)
		if err != nil && strings.ContainsAny(err.Error(), "\n\r") {
			t.Errorf("error with a line break: %q", err)
		}
	})
}
