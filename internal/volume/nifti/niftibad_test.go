package nifti

import (
	"bytes"
	"compress/gzip"
	"encoding/binary"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"testing"

	"brightfold/internal/inputerr"
	"brightfold/internal/volume"
)

// niiHeader1 builds a valid little-endian NIfTI-1 single-file header
// (nifti1.h field offsets) for int16 voxels, dim[0] = len(dims) and
// dim[1..] = dims, with a 2 mm diagonal sform.
func niiHeader1(dims ...int16) []byte {
	h := make([]byte, nifti1VoxOffset)
	le := binary.LittleEndian
	le.PutUint32(h[0:], 348)
	le.PutUint16(h[40:], uint16(len(dims)))
	for i := 1; i <= 7; i++ {
		d := int16(1)
		if i <= len(dims) {
			d = dims[i-1]
		}
		le.PutUint16(h[40+2*i:], uint16(d))
	}
	le.PutUint16(h[70:], uint16(DTInt16))
	le.PutUint16(h[72:], 16)
	for i, p := range []float32{1, 2, 2, 2, 1, 1, 1, 1} {
		putF32(h[76+4*i:], p)
	}
	putF32(h[108:], nifti1VoxOffset)
	le.PutUint16(h[254:], 1) // sform_code
	putF32(h[280:], 2)
	putF32(h[296+4:], 2)
	putF32(h[312+8:], 2)
	copy(h[344:], "n+1\x00")
	return h
}

// niiWithData appends zero data of the size the header dims ask for.
func niiWithData(h []byte, voxels int) []byte {
	return append(h, make([]byte, 2*voxels)...)
}

func niiSet16(b []byte, off int, v int16) []byte {
	b = append([]byte(nil), b...)
	binary.LittleEndian.PutUint16(b[off:], uint16(v))
	return b
}

func niiSetF32(b []byte, off int, v float32) []byte {
	b = append([]byte(nil), b...)
	putF32(b[off:], v)
	return b
}

func niiGzip(b []byte) []byte {
	var buf bytes.Buffer
	zw := gzip.NewWriter(&buf)
	zw.Write(b)
	zw.Close()
	return buf.Bytes()
}

// niiNIfTI2 is a valid NIfTI-2 header (nifti2.h offsets) with int64 dims.
func niiNIfTI2(dims ...int64) []byte {
	h := make([]byte, 544)
	le := binary.LittleEndian
	le.PutUint32(h[0:], 540)
	copy(h[4:], "n+2\x00\r\n\x1a\n")
	le.PutUint16(h[12:], uint16(DTInt16))
	le.PutUint16(h[14:], 16)
	le.PutUint64(h[16:], uint64(len(dims)))
	for i := 1; i <= 7; i++ {
		d := int64(1)
		if i <= len(dims) {
			d = dims[i-1]
		}
		le.PutUint64(h[16+8*i:], uint64(d))
	}
	for i := 0; i < 8; i++ {
		le.PutUint64(h[104+8*i:], math.Float64bits(1))
	}
	le.PutUint64(h[168:], 544)
	le.PutUint32(h[348:], 1) // sform_code
	le.PutUint64(h[400:], math.Float64bits(1))
	le.PutUint64(h[432+8:], math.Float64bits(1))
	le.PutUint64(h[464+16:], math.Float64bits(1))
	return h
}

type niiBadCase struct {
	name  string            // file name in the test folder
	files map[string][]byte // extra files beside it
	data  []byte
	opts  volume.LoadOptions
	want  string // expected part of the message
}

// niiBadCases are malformed inputs, each with the problem the error must name.
func niiBadCases() []niiBadCase {
	ok := niiHeader1(4, 4, 4)
	okData := niiWithData(ok, 64)
	gzOK := niiGzip(okData)
	noisy := niiHeader1(16, 16, 16)
	for i := 0; i < 4096; i++ {
		noisy = append(noisy, byte(i*7919>>3), byte(i*104729>>5))
	}
	gzNoisy := niiGzip(noisy)
	flipped := append([]byte(nil), gzOK...)
	flipped[len(flipped)/2] ^= 0xff
	pairHdr := append([]byte(nil), ok[:348]...)
	copy(pairHdr[344:], "ni1\x00")
	pairHdr = niiSetF32(pairHdr, 108, 0)
	sformNaN := niiSetF32(okData, 280, float32(math.NaN()))
	singular := niiSetF32(niiSetF32(niiSetF32(okData, 280, 0), 300, 0), 320, 0)
	qformOnly := niiSet16(niiSet16(okData, 254, 0), 252, 1)
	quatBig := niiSetF32(niiSetF32(qformOnly, 256, 0.9), 260, 0.9)
	analyze := append([]byte(nil), pairHdr...)
	copy(analyze[344:], "\x00\x00\x00\x00")
	n2huge := niiNIfTI2(3, 1<<40, 1<<40, 1<<40)
	n2magic := niiNIfTI2(3, 2, 2, 2)
	copy(n2magic[4:], "n+2\x00\n\x1a\n\x00")
	return []niiBadCase{
		{name: "empty.nii", data: nil, want: "truncated"},
		{name: "truncated.nii", data: ok[:100], want: "truncated: 100 bytes"},
		{name: "sizeof.nii", data: niiSet16(okData, 0, 1234), want: "sizeof_hdr is 1234"},
		{name: "magic.nii", data: append(append([]byte(nil), okData[:344]...), append([]byte("abc\x00"), okData[348:]...)...), want: "magic"},
		{name: "pairmagic.nii", data: niiWithData(pairHdr, 64), want: "not a .hdr"},
		{name: "n2magic.nii", data: niiWithData(n2magic, 8), want: "damaged"},
		{name: "dim0zero.nii", data: niiSet16(okData, 40, 0), want: "dim[0] is 0"},
		{name: "dim0big.nii", data: niiSet16(okData, 40, 9), want: "dim[0] is 9"},
		{name: "dimzero.nii", data: niiSet16(okData, 44, 0), want: "dim[2] is 0"},
		{name: "dimneg.nii", data: niiSet16(okData, 42, -5), want: "dim[1] is -5"},
		{name: "huge.nii", data: niiHeader1(32767, 32767, 32767, 32767, 32767, 32767, 32767), want: "exceed"},
		{name: "huge_n2.nii", data: n2huge, want: "too large"},
		{name: "bigframe.nii", data: niiHeader1(2000, 2000, 500), want: "needs"},
		{name: "datatype.nii", data: niiSet16(okData, 70, 999), want: "datatype 999"},
		{name: "complex.nii", data: niiSet16(okData, 70, 32), want: "complex64"},
		{name: "rgb.nii", data: niiSet16(okData, 70, 128), want: "rgb24"},
		{name: "offset_past.nii", data: niiSetF32(okData, 108, 1e6), want: "needs"},
		{name: "offset_neg.nii", data: niiSetF32(okData, 108, -4), want: "vox_offset"},
		{name: "offset_nan.nii", data: niiSetF32(okData, 108, float32(math.NaN())), want: "vox_offset"},
		{name: "offset_inside.nii", data: niiSetF32(okData, 108, 100), want: "inside the header"},
		{name: "short_data.nii", data: okData[:len(okData)-10], want: "file is"},
		{name: "analyze.nii", data: niiWithData(analyze, 64), want: "magic"},
		{name: "sform_nan.nii", data: sformNaN, want: "not finite"},
		{name: "sform_singular.nii", data: singular, want: "singular"},
		{name: "pixdim_zero.nii", data: niiSetF32(qformOnly, 80, 0), want: "pixdim[1] is 0"},
		{name: "pixdim_neg.nii", data: niiSetF32(niiSet16(qformOnly, 252, 0), 84, -2), want: "pixdim[2] is -2"},
		{name: "pixdim_nan.nii", data: niiSetF32(qformOnly, 88, float32(math.NaN())), want: "pixdim[3] is NaN"},
		{name: "quatern.nii", data: quatBig, want: "norm above 1"},
		{name: "inter_inf.nii", data: niiSetF32(niiSetF32(okData, 112, 2), 116, float32(math.Inf(1))), want: "scl_inter"},
		{name: "cifti.nii", data: niiSet16(okData, 68, 3001), want: "CIFTI"},
		{name: "gz_truncated.nii.gz", data: gzNoisy[:len(gzNoisy)/2], want: "ends early"},
		{name: "gz_flipped.nii.gz", data: flipped, want: "gzip"},
		{name: "gz_header.nii.gz", data: []byte{0x1f, 0x8b, 9, 9, 9}, want: "gzip"},
		{name: "gz_bomb.nii.gz", data: niiGzip(niiHeader1(2000, 2000, 100)), want: "more than a"},
		{name: "gz_later_frame.nii.gz", data: niiGzip(niiWithData(niiHeader1(4, 4, 4, 3), 64*2)), want: "after volume 0"},
		{name: "frame_index.nii", data: niiWithData(niiHeader1(4, 4, 4, 2), 128), opts: volume.LoadOptions{VolumeIndex: 2}, want: "volume index 2"},
		{name: "nohdr.img", data: make([]byte, 128), want: "no header"},
		{name: "noimg.hdr", data: pairHdr, want: "missing file"},
		{name: "shortimg.hdr", data: pairHdr, files: map[string][]byte{"shortimg.img": make([]byte, 100)}, want: "file is 100 bytes"},
		{name: "pairgz.hdr.gz", data: niiGzip(pairHdr), files: map[string][]byte{"pairgz.img.gz": niiGzip(make([]byte, 50))}, want: "ends early"},
		{name: "analyze_bad.hdr", data: niiSet16(analyze, 44, -1), want: "dim[2] is -1"},
	}
}

// TestNIfTIBadInput: every malformed input gives one input error line that
// names the file and the problem, without a panic and without a large
// allocation driven by the header.
func TestNIfTIBadInput(t *testing.T) {
	dir := t.TempDir()
	cases := niiBadCases()
	for _, c := range cases {
		p := filepath.Join(dir, c.name)
		if err := os.WriteFile(p, c.data, 0o644); err != nil {
			t.Fatal(err)
		}
		for n, b := range c.files {
			if err := os.WriteFile(filepath.Join(dir, n), b, 0o644); err != nil {
				t.Fatal(err)
			}
		}
		var before, after runtime.MemStats
		runtime.ReadMemStats(&before)
		v, err := volume.Load([]string{p}, c.opts)
		runtime.ReadMemStats(&after)
		if err == nil {
			t.Errorf("%s: loaded %v, want an error about %q", c.name, v.Dims, c.want)
			continue
		}
		msg := err.Error()
		if !inputerr.Is(err) || !strings.Contains(msg, c.name[:strings.IndexByte(c.name, '.')]) ||
			!strings.Contains(msg, c.want) || strings.Contains(msg, "\n") {
			t.Errorf("%s: error %q; want one input-error line naming the file and %q", c.name, msg, c.want)
		}
		if grew := after.TotalAlloc - before.TotalAlloc; grew > 8<<20 {
			t.Errorf("%s: allocated %d MB before refusing", c.name, grew>>20)
		}
	}
	t.Logf("%d malformed inputs refused", len(cases))
}

// FuzzNIfTIHeader feeds arbitrary bytes to the NIfTI header parser and the
// loader (as .nii and as a .hdr/.img pair): they must never panic, must
// return input errors, and a volume they return must be consistent.
func FuzzNIfTIHeader(f *testing.F) {
	ok := niiWithData(niiHeader1(4, 3, 2), 24)
	f.Add(ok)
	f.Add(niiGzip(ok))
	f.Add(niiWithData(niiHeader1(4, 2, 2, 2, 3), 48))
	f.Add(append(niiNIfTI2(3, 2, 2, 2), make([]byte, 16)...))
	for _, c := range niiBadCases() {
		f.Add(c.data)
	}
	dir := f.TempDir()
	f.Fuzz(func(t *testing.T, b []byte) {
		if len(b) > 1<<20 {
			return
		}
		for _, pair := range []bool{false, true} {
			if h, _, err := parseNIfTIHeader(b, pair); err == nil {
				h.affine()
			}
		}
		p := filepath.Join(dir, "f.nii")
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		v, err := volume.Load([]string{p}, volume.LoadOptions{})
		if err != nil {
			if !inputerr.Is(err) {
				t.Fatalf("not an input error: %v", err)
			}
			return
		}
		if len(v.Data) != v.Len() || v.Affine.Validate() != nil {
			t.Fatalf("inconsistent volume: dims %v, %d voxels, affine %v", v.Dims, len(v.Data), v.Affine)
		}
	})
}
