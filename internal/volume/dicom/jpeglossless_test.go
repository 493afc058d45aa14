package dicom

import (
	"encoding/binary"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"

	"brightfold/internal/refcheck"
)

// pydicom's SC_rgb_jpeg_gdcm.dcm (JPEG Lossless SV1, three interleaved
// 8-bit components) decodes to the pixels pydicom's own RLE decoder gives
// for the same image stored as RLE Lossless (SC_rgb_rle.dcm). Colour images
// are not loaded, but the decoder underneath grey-scale JPEG Lossless is the
// same code.
func TestLosslessJPEGMatchesPydicomRGB(t *testing.T) {
	refcheck.PythonModule(t, "pydicom")
	jpg := refcheck.Path(t, dcmPydicomDir+"/SC_rgb_jpeg_gdcm.dcm")
	rle := refcheck.Path(t, dcmPydicomDir+"/SC_rgb_rle.dcm")
	var refs []dcmPixelRef
	refcheck.RunPython(t, dicomRef, &refs, "pixels", t.TempDir(), rle)
	if len(refs) != 1 || !refs[0].OK || len(refs[0].Shape) != 3 {
		t.Fatalf("pydicom reference: %+v", refs)
	}
	want := dcmRefValues(t, refs[0].Values)
	data, err := os.ReadFile(jpg)
	if err != nil {
		t.Fatal(err)
	}
	ds, err := parseWithLibrary(data, dicom.SkipProcessingPixelDataValue())
	if err != nil {
		t.Fatal(err)
	}
	var frag []byte
	for _, e := range ds.Elements {
		if e.Tag == tag.PixelData {
			frag = e.Value.GetValue().(dicom.PixelDataInfo).Frames[0].EncapsulatedData.Data
		}
	}
	fr, scan, err := ljHeaders(frag)
	if err != nil {
		t.Fatal(err)
	}
	planes, err := fr.decode(frag, scan)
	if err != nil {
		t.Fatal(err)
	}
	h, w := refs[0].Shape[0], refs[0].Shape[1]
	if fr.width != w || fr.height != h || len(planes) != 3 {
		t.Fatalf("frame %d × %d with %d components, pydicom %v", fr.width, fr.height, len(planes), refs[0].Shape)
	}
	for i := 0; i < w*h; i++ {
		for c := 0; c < 3; c++ {
			if float64(planes[c][i]) != want[3*i+c] {
				t.Fatalf("pixel %d component %d: %d, pydicom %v", i, c, planes[c][i], want[3*i+c])
			}
		}
	}
	t.Logf("%s: %d × %d × 3 samples equal to pydicom's decoding of %s (predictor %d)", filepath.Base(jpg), w, h, filepath.Base(rle), fr.predictor)
}

// ljTestTable is a Huffman table for the 17 difference categories with
// code lengths 2, 3 (×5), 4, 5, …, 14 (Kraft sum below 1).
func ljTestTable() (counts [16]int, values []byte) {
	counts[1], counts[2] = 1, 5
	for l := 4; l <= 14; l++ {
		counts[l-1] = 1
	}
	for s := 0; s <= 16; s++ {
		values = append(values, byte(s))
	}
	return counts, values
}

// ljEncode is a test-only lossless JPEG encoder for one component (T.81
// Annex H with the Huffman coding of F.1.2: codes generated from the
// counts as in Annex C, 0x00 stuffed after 0xFF, 1-bit padding), with a
// restart marker every restartLines lines when that is positive.
func ljEncode(img []int, w, h, bits, predictor, restartLines int) []byte {
	counts, values := ljTestTable()
	codes := map[int][2]int{} // category → code, length
	code := 0
	k := 0
	for l := 1; l <= 16; l++ {
		for i := 0; i < counts[l-1]; i++ {
			codes[int(values[k])] = [2]int{code, l}
			code++
			k++
		}
		code <<= 1
	}
	var out []byte
	var acc, nacc int
	put := func(v, n int) {
		for i := n - 1; i >= 0; i-- {
			acc = acc<<1 | (v>>i)&1
			nacc++
			if nacc == 8 {
				out = append(out, byte(acc))
				if byte(acc) == 0xFF {
					out = append(out, 0)
				}
				acc, nacc = 0, 0
			}
		}
	}
	pad := func() {
		for nacc != 0 {
			put(1, 1)
		}
	}
	fr := &ljFrame{width: w, height: h, bits: bits, predictor: predictor}
	first := 1 << (bits - 1)
	top, rst := 0, 0
	for y := 0; y < h; y++ {
		if restartLines > 0 && y > 0 && y%restartLines == 0 {
			pad()
			out = append(out, 0xFF, byte(0xD0+rst%8))
			rst++
			top = y
		}
		for x := 0; x < w; x++ {
			d := (img[y*w+x] - fr.predict(img, x, y, top, first)) & 0xFFFF
			if d >= 32768 {
				d -= 65536
			}
			s, mag := 0, d
			if mag < 0 {
				mag = -mag
			}
			for mag>>s != 0 {
				s++
			}
			c := codes[s]
			put(c[0], c[1])
			if s > 0 && s < 16 {
				v := d
				if d < 0 {
					v = d + 1<<s - 1
				}
				put(v, s)
			}
		}
	}
	pad()
	hdr := []byte{0xFF, 0xD8, 0xFF, 0xC3, 0, 11, byte(bits)}
	hdr = binary.BigEndian.AppendUint16(hdr, uint16(h))
	hdr = binary.BigEndian.AppendUint16(hdr, uint16(w))
	hdr = append(hdr, 1, 1, 0x11, 0)
	dht := []byte{0x00}
	for _, c := range counts {
		dht = append(dht, byte(c))
	}
	dht = append(dht, values...)
	hdr = append(hdr, 0xFF, 0xC4)
	hdr = binary.BigEndian.AppendUint16(hdr, uint16(2+len(dht)))
	hdr = append(hdr, dht...)
	if restartLines > 0 {
		hdr = append(hdr, 0xFF, 0xDD, 0, 4)
		hdr = binary.BigEndian.AppendUint16(hdr, uint16(restartLines*w))
	}
	hdr = append(hdr, 0xFF, 0xDA, 0, 8, 1, 1, 0x00, byte(predictor), 0, 0)
	return append(append(hdr, out...), 0xFF, 0xD9)
}

// Round trips through the test encoder for every predictor of T.81 Table
// H.1, 8, 12 and 16 bits (up to the category-16 difference), with and
// without restart intervals.
func TestLosslessJPEGRoundTrip(t *testing.T) {
	rng := rand.New(rand.NewPCG(61, 62))
	for _, tc := range []struct{ w, h, bits, restart int }{{1, 1, 8, 0}, {17, 9, 8, 0}, {40, 30, 12, 0}, {64, 20, 16, 0}, {33, 21, 16, 4}, {10, 12, 8, 1}} {
		for pred := 1; pred <= 7; pred++ {
			img := jlsImage(rng, tc.w, tc.h, tc.bits)
			if tc.bits == 16 && len(img) > 2 {
				img[1] = 0 // a jump of 32768 or more from its neighbour: category 16
				img[2] = 65535
			}
			code := ljEncode(img, tc.w, tc.h, tc.bits, pred, tc.restart)
			bpp := 1
			if tc.bits > 8 {
				bpp = 2
			}
			dst := make([]byte, tc.w*tc.h*bpp)
			if err := decodeLosslessJPEG(code, tc.h, tc.w, bpp, dst); err != nil {
				t.Fatalf("%d×%d, %d bits, predictor %d, restart %d: %v", tc.w, tc.h, tc.bits, pred, tc.restart, err)
			}
			for i, want := range img {
				got := int(dst[i])
				if bpp == 2 {
					got = int(binary.LittleEndian.Uint16(dst[2*i:]))
				}
				if got != want {
					t.Fatalf("%d×%d, %d bits, predictor %d: sample %d = %d, want %d", tc.w, tc.h, tc.bits, pred, i, got, want)
				}
			}
		}
	}
}

// Truncated and damaged streams give errors, never a panic.
func TestLosslessJPEGDamaged(t *testing.T) {
	rng := rand.New(rand.NewPCG(63, 64))
	img := jlsImage(rng, 30, 30, 12)
	code := ljEncode(img, 30, 30, 12, 1, 0)
	dst := make([]byte, 30*30*2)
	for _, cut := range []int{0, 3, 20, len(code) / 2, len(code) - 30} {
		if err := decodeLosslessJPEG(code[:cut], 30, 30, 2, dst); err == nil {
			t.Errorf("cut at %d of %d bytes: no error", cut, len(code))
		}
	}
	lossy := append([]byte(nil), code...)
	lossy[3] = 0xC0 // baseline DCT frame
	if err := decodeLosslessJPEG(lossy, 30, 30, 2, dst); err == nil || !strings.Contains(err.Error(), "SOF3") {
		t.Errorf("baseline frame: %v", err)
	}
}

// FuzzLosslessJPEG decodes arbitrary data as a 16 × 16 frame: an error or
// a frame, never a panic or a hang.
func FuzzLosslessJPEG(f *testing.F) {
	rng := rand.New(rand.NewPCG(65, 66))
	f.Add(ljEncode(jlsImage(rng, 16, 16, 8), 16, 16, 8, 1, 0))
	f.Add(ljEncode(jlsImage(rng, 16, 16, 16), 16, 16, 16, 6, 2))
	f.Fuzz(func(t *testing.T, data []byte) {
		_ = decodeLosslessJPEG(data, 16, 16, 2, make([]byte, 16*16*2))
	})
}

// BenchmarkLosslessJPEG256 decodes one 256 × 256 12-bit slice (the test
// image of the round trips), for the per-slice cost of a compressed series.
func BenchmarkLosslessJPEG256(b *testing.B) {
	img := jlsImage(rand.New(rand.NewPCG(67, 68)), 256, 256, 12)
	code := ljEncode(img, 256, 256, 12, 1, 0)
	dst := make([]byte, 256*256*2)
	b.SetBytes(int64(len(dst)))
	for i := 0; i < b.N; i++ {
		if err := decodeLosslessJPEG(code, 256, 256, 2, dst); err != nil {
			b.Fatal(err)
		}
	}
}
