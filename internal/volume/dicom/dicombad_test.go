package dicom

import (
	"bytes"
	"encoding/binary"
	"os"
	"path/filepath"
	"runtime"
	"sort"
	"testing"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"

	"brightfold/internal/volume"
)

// dcmSmallSeries writes a 4×4 series of n slices into dir and returns its files.
func dcmSmallSeries(t testing.TB, dir string, n int) []string {
	t.Helper()
	v := dcmObliqueVolume(t, [3]int{4, 4, n}, true)
	if err := WriteSeries(dir, v, dcmDemoOptions("bad/"+filepath.Base(dir))); err != nil {
		t.Fatal(err)
	}
	return dcmSeriesFiles(t, dir)
}

// dcmRewrite parses a file (pixel data kept as stored bytes), lets edit
// change its elements, and writes it back in tag order.
func dcmRewrite(t testing.TB, path string, edit func(els []*dicom.Element) []*dicom.Element) {
	t.Helper()
	ds, err := dicom.ParseFile(path, nil, dicom.SkipProcessingPixelDataValue())
	if err != nil {
		t.Fatal(err)
	}
	els := edit(ds.Elements)
	sort.SliceStable(els, func(a, b int) bool { return dcmTagLess(els[a].Tag, els[b].Tag) })
	var buf bytes.Buffer
	if err := dicom.Write(&buf, dicom.Dataset{Elements: els}, dicom.SkipVRVerification(), dicom.SkipValueTypeVerification()); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
}

// dcmSet replaces (or adds) the element with tag tg; a nil value removes it.
func dcmSet(t testing.TB, tg tag.Tag, val any) func([]*dicom.Element) []*dicom.Element {
	return func(els []*dicom.Element) []*dicom.Element {
		out := els[:0:0]
		for _, e := range els {
			if e.Tag != tg {
				out = append(out, e)
			}
		}
		if val == nil {
			return out
		}
		e, err := dicom.NewElement(tg, val)
		if err != nil {
			t.Fatal(err)
		}
		return append(out, e)
	}
}

// dcmRawElem encodes one explicit VR little endian element (PS3.5 7.1.2).
func dcmRawElem(group, elem uint16, vr string, val []byte) []byte {
	var b []byte
	b = binary.LittleEndian.AppendUint16(b, group)
	b = binary.LittleEndian.AppendUint16(b, elem)
	b = append(b, vr...)
	if longLengthVR(vr) {
		b = append(b, 0, 0)
		b = binary.LittleEndian.AppendUint32(b, uint32(len(val)))
	} else {
		b = binary.LittleEndian.AppendUint16(b, uint16(len(val)))
	}
	return append(b, val...)
}

func dcmPad(s string) []byte {
	if len(s)%2 == 1 {
		s += "\x00"
	}
	return []byte(s)
}

// dcmRawFile is a preamble, "DICM" and a file meta group naming ts, then body.
func dcmRawFile(ts string, body []byte) []byte {
	var meta []byte
	meta = append(meta, dcmRawElem(0x0002, 0x0001, "OB", []byte{0, 1})...)
	meta = append(meta, dcmRawElem(0x0002, 0x0002, "UI", dcmPad(MRImageStorage))...)
	meta = append(meta, dcmRawElem(0x0002, 0x0003, "UI", dcmPad("1.2.3.4"))...)
	meta = append(meta, dcmRawElem(0x0002, 0x0010, "UI", dcmPad(ts))...)
	out := make([]byte, 128, 128+len(meta)+len(body)+16)
	out = append(out, "DICM"...)
	out = append(out, dcmRawElem(0x0002, 0x0000, "UL", binary.LittleEndian.AppendUint32(nil, uint32(len(meta))))...)
	out = append(out, meta...)
	return append(out, body...)
}

// dcmBadCase makes one malformed input in dir and returns the path to load
// and the path the error must start with.
type dcmBadCase struct {
	name, want string
	make       func(t *testing.T, dir string) (load []string, names string)
}

func dcmEditSlice(slice int, edits ...func(t testing.TB) func([]*dicom.Element) []*dicom.Element) func(t *testing.T, dir string) ([]string, string) {
	return func(t *testing.T, dir string) ([]string, string) {
		files := dcmSmallSeries(t, dir, 4)
		for _, e := range edits {
			dcmRewrite(t, files[slice], e(t))
		}
		return []string{dir}, files[slice]
	}
}

func setTag(tg tag.Tag, val any) func(t testing.TB) func([]*dicom.Element) []*dicom.Element {
	return func(t testing.TB) func([]*dicom.Element) []*dicom.Element { return dcmSet(t, tg, val) }
}

func dcmRawCase(ts string, body func() []byte) func(t *testing.T, dir string) ([]string, string) {
	return func(t *testing.T, dir string) ([]string, string) {
		p := filepath.Join(dir, "raw.dcm")
		if err := os.WriteFile(p, dcmRawFile(ts, body()), 0o644); err != nil {
			t.Fatal(err)
		}
		return []string{p}, p
	}
}

// dcmMoveSlice rewrites one slice's ImagePositionPatient to the position of
// slice k plus frac of a slice step (or an in-plane shift).
func dcmMoveSlice(slice int, k float64, inPlane float64) func(t *testing.T, dir string) ([]string, string) {
	return func(t *testing.T, dir string) ([]string, string) {
		v := dcmObliqueVolume(t, [3]int{4, 4, 5}, true)
		if err := WriteSeries(dir, v, dcmDemoOptions("move")); err != nil {
			t.Fatal(err)
		}
		files := dcmSeriesFiles(t, dir)
		geo, _ := lpsGeometry(v.Affine)
		p := geo.origin.add(geo.sliceStep.scale(k)).add(geo.rowDir.scale(inPlane))
		dcmRewrite(t, files[slice], dcmSet(t, tag.ImagePositionPatient, []string{dcmDS(p[0]), dcmDS(p[1]), dcmDS(p[2])}))
		return []string{dir}, dir
	}
}

var dcmBadCases = []dcmBadCase{
	{"DICOM without pixel data", "without pixel data", func(t *testing.T, dir string) ([]string, string) {
		files := dcmSmallSeries(t, dir, 1)
		dcmRewrite(t, files[0], dcmSet(t, tag.PixelData, nil))
		return files, files[0]
	}},
	{"folder of files without pixel data", "without pixel data", func(t *testing.T, dir string) ([]string, string) {
		for _, f := range dcmSmallSeries(t, dir, 2) {
			dcmRewrite(t, f, dcmSet(t, tag.PixelData, nil))
		}
		return []string{dir}, dir
	}},
	{"series with a missing slice", "missing slice", func(t *testing.T, dir string) ([]string, string) {
		files := dcmSmallSeries(t, dir, 5)
		if err := os.Remove(files[2]); err != nil {
			t.Fatal(err)
		}
		return []string{dir}, dir
	}},
	{"series with a duplicated position", "same position", func(t *testing.T, dir string) ([]string, string) {
		dcmDuplicatePosition(t, dcmSmallSeries(t, dir, 4))
		return []string{dir}, dir
	}},
	{"uneven slice spacing", "uneven slice spacing", dcmMoveSlice(2, 2.3, 0)},
	{"slice shifted in plane", "off the line", dcmMoveSlice(2, 2, 3.0)},
	{"mixed series without a choice", "2 series found", func(t *testing.T, dir string) ([]string, string) {
		dcmSmallSeries(t, filepath.Join(dir, "a"), 2)
		dcmSmallSeries(t, filepath.Join(dir, "b"), 3)
		return []string{dir}, dir
	}},
	{"empty folder", "no files found", func(t *testing.T, dir string) ([]string, string) {
		return []string{dir}, dir
	}},
	{"folder of non-DICOM files", "no DICOM files", func(t *testing.T, dir string) ([]string, string) {
		for name, data := range map[string]string{"notes.txt": "scan notes\n", "a.json": "{}", "blob.bin": string(make([]byte, 4096))} {
			if err := os.WriteFile(filepath.Join(dir, name), []byte(data), 0o644); err != nil {
				t.Fatal(err)
			}
		}
		return []string{dir}, dir
	}},
	{"non-DICOM file named explicitly", "not a DICOM file", func(t *testing.T, dir string) ([]string, string) {
		p := filepath.Join(dir, "scan.dcm")
		if err := os.WriteFile(p, []byte("hello"), 0o644); err != nil {
			t.Fatal(err)
		}
		return []string{p}, p
	}},
	{"file truncated in the header", "truncated", func(t *testing.T, dir string) ([]string, string) {
		files := dcmSmallSeries(t, dir, 1)
		b, _ := os.ReadFile(files[0])
		if err := os.WriteFile(files[0], b[:400], 0o644); err != nil {
			t.Fatal(err)
		}
		return files, files[0]
	}},
	{"file truncated in the pixel data", "truncated", func(t *testing.T, dir string) ([]string, string) {
		files := dcmSmallSeries(t, dir, 3)
		b, _ := os.ReadFile(files[1])
		if err := os.WriteFile(files[1], b[:len(b)-7], 0o644); err != nil {
			t.Fatal(err)
		}
		return []string{dir}, files[1]
	}},
	{"absurd rows and columns", "not a usable image size", dcmEditSlice(0, setTag(tag.Rows, []int{65535}), setTag(tag.Columns, []int{65535}))},
	{"pixel data shorter than rows × columns", "need", dcmEditSlice(1, setTag(tag.Rows, []int{30000}), setTag(tag.Columns, []int{30000}))},
	{"absurd NumberOfFrames", "out of range", dcmEditSlice(0, setTag(tag.NumberOfFrames, []string{"2147483647"}))},
	{"zero rows", "not a usable image size", dcmEditSlice(3, setTag(tag.Rows, []int{0}))},
	{"missing ImageOrientationPatient", "ImageOrientationPatient (0020,0037) is missing", dcmEditSlice(1, setTag(tag.ImageOrientationPatient, nil))},
	{"orientation not perpendicular", "not perpendicular", dcmEditSlice(1, setTag(tag.ImageOrientationPatient, []string{"1", "0", "0", "0.7071", "0.7071", "0"}))},
	{"NaN in ImagePositionPatient", "NaN", dcmEditSlice(2, setTag(tag.ImagePositionPatient, []string{"0", "NaN", "3"}))},
	{"zero PixelSpacing", "not positive", dcmEditSlice(0, setTag(tag.PixelSpacing, []string{"0", "1"}))},
	{"RescaleSlope zero", "unusable", dcmEditSlice(0, setTag(tag.RescaleSlope, []string{"0"}))},
	{"BitsAllocated 12", "BitsAllocated 12", dcmEditSlice(0, setTag(tag.BitsAllocated, []int{12}))},
	{"colour image", "colour", dcmEditSlice(0, setTag(tag.SamplesPerPixel, []int{3}))},
	{"NumberOfFrames beyond the pixel data", "need", dcmEditSlice(0, setTag(tag.NumberOfFrames, []string{"2"}))},
	{"multi-frame without per-frame geometry", "without per-frame geometry", dcmEditSlice(0, setTag(tag.NumberOfFrames, []string{"2"}),
		func(t testing.TB) func([]*dicom.Element) []*dicom.Element {
			return dcmSet(t, tag.PixelData, dicom.PixelDataInfo{IntentionallyUnprocessed: true, UnprocessedValueData: make([]byte, 64)})
		})},
	{"string length past the end of the file", "runs past the end", dcmRawCase(tsImplicitLE, func() []byte {
		b := binary.LittleEndian.AppendUint16(nil, 0x0010)
		b = binary.LittleEndian.AppendUint16(b, 0x0010)
		b = binary.LittleEndian.AppendUint32(b, 0xFFFFFFF0) // PatientName of 4 GiB
		return append(b, "DEMO^SUBJECT0001"...)
	})},
	{"sequences nested without bound", "nested deeper", dcmRawCase(tsExplicitLE, func() []byte {
		var b []byte
		for i := 0; i < 200; i++ {
			b = append(b, 0x08, 0x00, 0x15, 0x11, 'S', 'Q', 0, 0, 0xFF, 0xFF, 0xFF, 0xFF) // (0008,1115) undefined length
			b = append(b, 0xFE, 0xFF, 0x00, 0xE0, 0xFF, 0xFF, 0xFF, 0xFF)                 // item, undefined length
		}
		return b
	})},
	{"non-item element inside a sequence", "where an item belongs", dcmRawCase(tsExplicitLE, func() []byte {
		inner := dcmRawElem(0x0008, 0x0060, "CS", dcmPad("MR"))
		return dcmRawElem(0x0008, 0x1115, "SQ", inner)
	})},
	{"compressed transfer syntax", "1.2.840.10008.1.2.4.50 JPEG Baseline", dcmRawCase("1.2.840.10008.1.2.4.50", func() []byte {
		return dcmRawElem(0x0028, 0x0010, "US", []byte{4, 0})
	})},
	{"unknown transfer syntax", "1.2.3.4.5.6", dcmRawCase("1.2.3.4.5.6", func() []byte { return nil })},
	{"encapsulated pixel data under a native syntax", "encapsulated", dcmRawCase(tsExplicitLE, func() []byte {
		b := dcmRawElem(0x0028, 0x0002, "US", []byte{1, 0})
		b = append(b, dcmRawElem(0x0028, 0x0010, "US", []byte{2, 0})...)
		b = append(b, dcmRawElem(0x0028, 0x0011, "US", []byte{2, 0})...)
		b = append(b, dcmRawElem(0x0028, 0x0100, "US", []byte{8, 0})...)
		b = append(b, 0xE0, 0x7F, 0x10, 0x00, 'O', 'B', 0, 0, 0xFF, 0xFF, 0xFF, 0xFF)
		b = append(b, 0xFE, 0xFF, 0x00, 0xE0, 0, 0, 0, 0) // empty offset table
		b = append(b, 0xFE, 0xFF, 0x00, 0xE0, 4, 0, 0, 0, 1, 2, 3, 4)
		return append(b, 0xFE, 0xFF, 0xDD, 0xE0, 0, 0, 0, 0)
	})},
	{"RLE Lossless with native pixel data", "not encapsulated", dcmRawCase(tsRLE, func() []byte {
		b := dcmRawElem(0x0028, 0x0002, "US", []byte{1, 0})
		b = append(b, dcmRawElem(0x0028, 0x0010, "US", []byte{2, 0})...)
		b = append(b, dcmRawElem(0x0028, 0x0011, "US", []byte{2, 0})...)
		b = append(b, dcmRawElem(0x0028, 0x0100, "US", []byte{8, 0})...)
		return append(b, dcmRawElem(0x7FE0, 0x0010, "OB", []byte{1, 2, 3, 4})...)
	})},
	// a 64-byte fragment cannot expand to 1000 frames of 512 × 512 16-bit
	// pixels: refused before the 500 MB are allocated
	{"RLE Lossless fragment far too small for the image", "too few", dcmRawCase(tsRLE, func() []byte {
		return dcmHugeEncapsulated(append([]byte{2, 0, 0, 0, 64}, make([]byte, 59)...))
	})},
	// 1000 frames of 512 lines need at least 512000 bits of JPEG-LS code
	{"JPEG-LS fragment far too small for the image", "too few", dcmRawCase(tsJPEGLS, func() []byte {
		return dcmHugeEncapsulated(append([]byte{0xFF, 0xD8}, make([]byte, 62)...))
	})},
	{"RLE Lossless segment that ends early", "ends after", dcmRawCase(tsRLE, func() []byte {
		b := dcmRawElem(0x0020, 0x0032, "DS", dcmPad("0\\0\\0"))
		b = append(b, dcmRawElem(0x0020, 0x0037, "DS", dcmPad("1\\0\\0\\0\\1\\0"))...)
		b = append(b, dcmRawElem(0x0028, 0x0002, "US", []byte{1, 0})...)
		b = append(b, dcmRawElem(0x0028, 0x0010, "US", []byte{2, 0})...)
		b = append(b, dcmRawElem(0x0028, 0x0011, "US", []byte{2, 0})...)
		b = append(b, dcmRawElem(0x0028, 0x0030, "DS", dcmPad("1\\1"))...)
		b = append(b, dcmRawElem(0x0028, 0x0100, "US", []byte{8, 0})...)
		b = append(b, 0xE0, 0x7F, 0x10, 0x00, 'O', 'B', 0, 0, 0xFF, 0xFF, 0xFF, 0xFF)
		b = append(b, 0xFE, 0xFF, 0x00, 0xE0, 0, 0, 0, 0) // empty offset table
		frag := make([]byte, 64)
		frag[0], frag[4] = 1, 64
		frag = append(frag, 0x01, 7, 8) // two of the four pixels
		frag = append(frag, 0x80)       // a no-op run, padding to even length
		b = append(b, 0xFE, 0xFF, 0x00, 0xE0, byte(len(frag)), 0, 0, 0)
		b = append(b, frag...)
		return append(b, 0xFE, 0xFF, 0xDD, 0xE0, 0, 0, 0, 0)
	})},
}

// dcmHugeEncapsulated is the body of a file that claims 1000 frames of
// 512 × 512 16-bit pixels (500 MB) and holds one 64-byte fragment.
func dcmHugeEncapsulated(frag []byte) []byte {
	b := dcmRawElem(0x0028, 0x0002, "US", []byte{1, 0})
	b = append(b, dcmRawElem(0x0028, 0x0008, "IS", dcmPad("1000"))...)
	b = append(b, dcmRawElem(0x0028, 0x0010, "US", []byte{0, 2})...)
	b = append(b, dcmRawElem(0x0028, 0x0011, "US", []byte{0, 2})...)
	b = append(b, dcmRawElem(0x0028, 0x0100, "US", []byte{16, 0})...)
	b = append(b, 0xE0, 0x7F, 0x10, 0x00, 'O', 'B', 0, 0, 0xFF, 0xFF, 0xFF, 0xFF)
	b = append(b, 0xFE, 0xFF, 0x00, 0xE0, 0, 0, 0, 0) // empty offset table
	b = append(b, 0xFE, 0xFF, 0x00, 0xE0, byte(len(frag)), 0, 0, 0)
	b = append(b, frag...)
	return append(b, 0xFE, 0xFF, 0xDD, 0xE0, 0, 0, 0, 0)
}

// TestDICOMBadInput: each malformed input gives one input error line that
// names the file (or the folder) and the problem, without a panic and
// without allocating anything like what the header asks for.
func TestDICOMBadInput(t *testing.T) {
	for _, c := range dcmBadCases {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			load, names := c.make(t, dir)
			var before, after runtime.MemStats
			runtime.ReadMemStats(&before)
			_, err := volume.Load(load, volume.LoadOptions{})
			runtime.ReadMemStats(&after)
			dcmCheckInputError(t, c.name, names, err, c.want)
			t.Log(err)
			if grew := after.TotalAlloc - before.TotalAlloc; grew > 64<<20 {
				t.Errorf("loading allocated %d MiB", grew>>20)
			}
			if _, lerr := ListSeries(load); lerr == nil && err == nil {
				t.Error("ListSeries and Load both accepted it")
			}
		})
	}
}

// dcmDuplicatePosition gives slice 2 the position of slice 1, keeping its
// own SOP Instance UID.
func dcmDuplicatePosition(t *testing.T, files []string) {
	ds, err := dicom.ParseFile(files[1], nil, dicom.SkipPixelData())
	if err != nil {
		t.Fatal(err)
	}
	ipp, err := ds.FindElementByTag(tag.ImagePositionPatient)
	if err != nil {
		t.Fatal(err)
	}
	dcmRewrite(t, files[2], dcmSet(t, tag.ImagePositionPatient, dicom.MustGetStrings(ipp.Value)))
}
