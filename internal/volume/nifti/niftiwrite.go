package nifti

import (
	"bufio"
	"encoding/binary"
	"fmt"
	"io"
	"math"
	"strings"

	"github.com/klauspost/compress/gzip"

	"brightfold/internal/atomicfile"
	"brightfold/internal/notice"
	"brightfold/internal/parallel"
	"brightfold/internal/volume"
)

// DataType is a stored NIfTI voxel type (the header's datatype field).
type DataType int16

// NIfTI-1 datatype codes (nifti1.h, "datatype" field; the same codes in NIfTI-2).
const (
	DTUint8   DataType = 2
	DTInt16   DataType = 4
	DTInt32   DataType = 8
	DTFloat32 DataType = 16
	DTFloat64 DataType = 64
	DTInt8    DataType = 256
	DTUint16  DataType = 512
	DTUint32  DataType = 768
	DTInt64   DataType = 1024
	DTUint64  DataType = 1280
)

// NIfTI-1 xform codes (nifti1.h, qform_code / sform_code).
const (
	XformUnknown     = 0
	XformScannerAnat = 1
	XformAligned     = 2
	XformTalairach   = 3
	XformMNI152      = 4
)

// WriteOptions control Write.
type WriteOptions struct {
	// DataType is the stored type: DTFloat32 (the default when zero), DTInt16
	// (scaled through scl_slope/scl_inter when the values are not small
	// integers) or DTUint8 (for masks and label maps; scaled likewise).
	DataType DataType
	// Description goes into the 80-byte descrip field; empty means notice.Short.
	Description string
	// SformCode and QformCode are the NIfTI-1 xform codes; zero means
	// XformScannerAnat. Use a negative value to write code 0 (unknown).
	SformCode, QformCode int
	// GzipLevel is the compression level of a .gz path, with the constants
	// of compress/gzip (the same values in github.com/klauspost/compress/gzip):
	// zero means gzip.DefaultCompression (level 5 of klauspost/compress, the
	// writer used), as before the option existed; gzip.HuffmanOnly (-2),
	// gzip.DefaultCompression (-1) and gzip.BestSpeed (1) through
	// gzip.BestCompression (9) are accepted, anything else is refused (0 is
	// taken, so there is no uncompressed .gz; write a .nii instead). Most
	// bytes of a noisy scan are noise, which LZ77 matching cannot shorten:
	// there HuffmanOnly is faster than the default for a file a few percent
	// larger (BenchmarkWriteNIfTIGzLevels weighs both); on masks and label
	// maps (long runs of zeros) BestSpeed is the better choice. Ignored for a
	// .nii path but checked.
	GzipLevel int
}

// gzipLevel is the klauspost/compress/gzip level of opts.GzipLevel.
func (o WriteOptions) gzipLevel() (int, error) {
	switch l := o.GzipLevel; {
	case l == 0:
		return gzip.DefaultCompression, nil
	case l == gzip.HuffmanOnly || l == gzip.DefaultCompression || (l >= gzip.BestSpeed && l <= gzip.BestCompression):
		return l, nil
	}
	return 0, fmt.Errorf("gzip level %d is not one of -2 (Huffman only), -1 (default) or 1..9", o.GzipLevel)
}

// The NIfTI-1 single-file layout: a 348-byte header, 4 extension bytes, data at 352.
const (
	nifti1HeaderSize = 348
	nifti1VoxOffset  = 352
	descripLen       = 80
)

// Write writes v as a NIfTI-1 single file (.nii, or gzip-compressed when
// path ends in .gz), atomically. The sform holds v.Affine exactly (to float32
// precision); the qform holds its rigid part through the NIfTI-1 quaternion
// decomposition, with qfac = -1 for a left-handed affine. The same volume and
// options always give the same bytes (gzip without name or time stamp, at
// opts.GzipLevel).
func Write(path string, v *volume.Volume, opts WriteOptions) error {
	level, err := opts.gzipLevel()
	if err != nil {
		return fmt.Errorf("write NIfTI %s: %w", path, err)
	}
	hdr, body, err := encodeNIfTI1(v, opts)
	if err != nil {
		return fmt.Errorf("write NIfTI %s: %w", path, err)
	}
	gz := strings.HasSuffix(strings.ToLower(path), ".gz")
	return atomicfile.Write(path, func(w io.Writer) error {
		if !gz {
			return writeParts(w, hdr, body)
		}
		zw, err := gzip.NewWriterLevel(w, level)
		if err != nil {
			return err
		}
		if err := writeParts(zw, hdr, body); err != nil {
			return err
		}
		return zw.Close()
	})
}

func writeParts(w io.Writer, parts ...[]byte) error {
	bw := bufio.NewWriterSize(w, 1<<20)
	for _, p := range parts {
		if _, err := bw.Write(p); err != nil {
			return err
		}
	}
	return bw.Flush()
}

// encodeNIfTI1 returns the 352 bytes before the data and the data bytes.
func encodeNIfTI1(v *volume.Volume, opts WriteOptions) (hdr, body []byte, err error) {
	n, err := volume.CheckedProduct(v.Dims[:], volume.MaxVoxels)
	if err != nil {
		return nil, nil, err
	}
	if len(v.Data) != n {
		return nil, nil, fmt.Errorf("volume holds %d voxels, dims %v need %d", len(v.Data), v.Dims, n)
	}
	for i, d := range v.Dims {
		if d > math.MaxInt16 {
			return nil, nil, fmt.Errorf("dim %d is %d; NIfTI-1 holds at most %d", i+1, d, math.MaxInt16)
		}
	}
	if err := v.Affine.Validate(); err != nil {
		return nil, nil, err
	}
	desc := opts.Description
	if desc == "" {
		desc = notice.Short
	}
	if len(desc) > descripLen {
		return nil, nil, fmt.Errorf("description is %d bytes; the NIfTI-1 descrip field holds %d", len(desc), descripLen)
	}
	dt := opts.DataType
	if dt == 0 {
		dt = DTFloat32
	}
	body, slope, inter, err := encodeVoxels(v.Data, dt)
	if err != nil {
		return nil, nil, err
	}
	h := make([]byte, nifti1VoxOffset)
	putNIfTI1Header(h, v, dt, slope, inter, desc, opts)
	return h, body, nil
}

func xformCode(c int) int16 {
	switch {
	case c == 0:
		return XformScannerAnat
	case c < 0:
		return XformUnknown
	}
	return int16(c)
}

// putNIfTI1Header fills the header fields of nifti1.h at their byte offsets.
func putNIfTI1Header(h []byte, v *volume.Volume, dt DataType, slope, inter float32, desc string, opts WriteOptions) {
	le := binary.LittleEndian
	le.PutUint32(h[0:], nifti1HeaderSize) // sizeof_hdr
	h[38] = 'r'                           // regular (Analyze legacy; nibabel writes 'r')
	dims := [8]int16{3, int16(v.Dims[0]), int16(v.Dims[1]), int16(v.Dims[2]), 1, 1, 1, 1}
	for i, d := range dims {
		le.PutUint16(h[40+2*i:], uint16(d)) // dim[8]
	}
	le.PutUint16(h[70:], uint16(dt))               // datatype
	le.PutUint16(h[72:], uint16(bitsPerVoxel(dt))) // bitpix
	q := quaternFromAffine(v.Affine)
	pixdim := [8]float32{float32(q.qfac), float32(q.pixdim[0]), float32(q.pixdim[1]), float32(q.pixdim[2]), 1, 1, 1, 1}
	for i, p := range pixdim {
		putF32(h[76+4*i:], p) // pixdim[8]
	}
	putF32(h[108:], nifti1VoxOffset) // vox_offset
	putF32(h[112:], slope)           // scl_slope
	putF32(h[116:], inter)           // scl_inter
	h[123] = 2                       // xyzt_units: NIFTI_UNITS_MM
	copy(h[148:148+descripLen], desc)
	le.PutUint16(h[252:], uint16(xformCode(opts.QformCode))) // qform_code
	le.PutUint16(h[254:], uint16(xformCode(opts.SformCode))) // sform_code
	for i, x := range []float64{q.b, q.c, q.d, q.offset[0], q.offset[1], q.offset[2]} {
		putF32(h[256+4*i:], float32(x)) // quatern_b..d, qoffset_x..z
	}
	for r := 0; r < 3; r++ {
		for c := 0; c < 4; c++ {
			putF32(h[280+16*r+4*c:], float32(v.Affine[r][c])) // srow_x, srow_y, srow_z
		}
	}
	copy(h[344:], "n+1\x00") // magic: single file
	// Bytes 348..351 stay zero: no extensions.
}

func putF32(b []byte, f float32) { binary.LittleEndian.PutUint32(b, math.Float32bits(f)) }

func bitsPerVoxel(dt DataType) int {
	switch dt {
	case DTUint8, DTInt8:
		return 8
	case DTInt16, DTUint16:
		return 16
	case DTInt32, DTUint32, DTFloat32:
		return 32
	case DTFloat64, DTInt64, DTUint64:
		return 64
	}
	return 0
}

// encodeVoxels stores data as dt (little-endian) and returns the scl_slope and
// scl_inter that map stored values back (value = stored·slope + inter).
func encodeVoxels(data []float32, dt DataType) (body []byte, slope, inter float32, err error) {
	switch dt {
	case DTFloat32:
		body = make([]byte, 4*len(data))
		for i, x := range data {
			binary.LittleEndian.PutUint32(body[4*i:], math.Float32bits(x))
		}
		return body, 1, 0, nil
	case DTInt16:
		return encodeInts(data, math.MinInt16, math.MaxInt16, 2)
	case DTUint8:
		return encodeInts(data, 0, math.MaxUint8, 1)
	}
	return nil, 0, 0, fmt.Errorf("writing datatype %d is not supported (use float32, int16 or uint8)", dt)
}

// encodeInts quantises data into integers in [lo, hi] of size bytes each.
// Integral values that fit are stored exactly with slope 1 and inter 0;
// otherwise the finite range [min, max] is spread over [lo, hi] so that the
// rounding error is at most (max-min)/(hi-lo)/2. Large volumes are scanned
// and quantised in blocks on all CPUs; the bytes do not depend on how many.
func encodeInts(data []float32, lo, hi float64, size int) (body []byte, slope, inter float32, err error) {
	r, err := scanRange(data)
	if err != nil {
		return nil, 0, 0, err
	}
	// Exact means stored as is; a scaled range may still end up with slope 1
	// and inter 0 (say 0, 0.5 and 255 into uint8), and those values round.
	exact := len(data) == 0 || (r.integral && r.min >= lo && r.max <= hi)
	slope, inter = 1, 0
	if !exact {
		if r.max > r.min {
			slope = float32((r.max - r.min) / (hi - lo))
		}
		inter = float32(r.min - lo*float64(slope))
	}
	body = make([]byte, size*len(data))
	forBlocks(len(data), func(a, b int) {
		switch {
		case exact && size == 1:
			putExactUint8(body[a:b], data[a:b])
		case exact:
			putExactInt16(body[2*a:2*b], data[a:b])
		default:
			putScaled(body[size*a:size*b], data[a:b], float64(slope), float64(inter), lo, hi, size)
		}
	})
	return body, slope, inter, nil
}

// valueRange is the minimum and maximum of some voxel values and whether
// all of them are integers.
type valueRange struct {
	min, max float64
	integral bool
	bad      int // index of the first NaN or infinity, or -1
}

// scanRange finds the range of data, or the first value that is not finite.
func scanRange(data []float32) (valueRange, error) {
	nb := numBlocks(len(data))
	parts := make([]valueRange, nb)
	forBlocks(len(data), func(a, b int) { parts[a/encodeBlock] = blockRange(data[a:b], a) })
	r := valueRange{min: math.Inf(1), max: math.Inf(-1), integral: true, bad: -1}
	for _, p := range parts {
		if p.bad >= 0 {
			return r, fmt.Errorf("voxel %d is %v; an integer datatype cannot hold it", p.bad, data[p.bad])
		}
		r.min, r.max = lowerOf(r.min, p.min), max(r.max, p.max)
		r.integral = r.integral && p.integral
	}
	return r, nil
}

// blockRange is scanRange of one block whose first voxel has index off.
func blockRange(data []float32, off int) valueRange {
	r := valueRange{min: math.Inf(1), max: math.Inf(-1), integral: true, bad: -1}
	for i, x := range data {
		f := float64(x)
		if f-f != 0 { // NaN or ±Inf
			r.bad = off + i
			return r
		}
		r.min = lowerOf(r.min, f)
		if f > r.max {
			r.max = f
		}
		if r.integral && f != math.Trunc(f) {
			r.integral = false
		}
	}
	return r
}

// lowerOf is math.Min for finite values (−0 counts as less than +0, which
// keeps scl_inter's sign bit as math.Min gave it) without its per-call cost.
func lowerOf(m, f float64) float64 {
	if f < m || (f == m && math.Signbit(f)) {
		return f
	}
	return m
}

// putExactUint8 stores integers already known to lie in [0, 255].
func putExactUint8(out []byte, vals []float32) {
	for i, x := range vals {
		out[i] = uint8(x)
	}
}

// putExactInt16 stores integers already known to lie in [-32768, 32767].
func putExactInt16(out []byte, vals []float32) {
	out = out[:2*len(vals)]
	for i, x := range vals {
		binary.LittleEndian.PutUint16(out[2*i:], uint16(int16(x)))
	}
}

// putScaled stores round((x - inter) / slope) clamped to [lo, hi].
func putScaled(out []byte, vals []float32, s, c, lo, hi float64, size int) {
	for i, x := range vals {
		q := math.Round((float64(x) - c) / s)
		if q < lo {
			q = lo
		} else if q > hi {
			q = hi
		}
		if size == 1 {
			out[i] = uint8(q)
		} else {
			binary.LittleEndian.PutUint16(out[2*i:], uint16(int16(q)))
		}
	}
}

// encodeBlock is the number of voxels one goroutine of the NIfTI writer
// scans or quantises at a time.
const encodeBlock = 1 << 18

func numBlocks(n int) int { return (n + encodeBlock - 1) / encodeBlock }

// forBlocks calls f(a, b) for the blocks [a, b) of encodeBlock voxels that
// cover [0, n), on all CPUs when there is more than one block.
func forBlocks(n int, f func(a, b int)) {
	parallel.Each(numBlocks(n), 0, func(_, k int) { f(k*encodeBlock, min(n, (k+1)*encodeBlock)) })
}

// quatern is the NIfTI-1 qform parameterisation of an affine.
type quatern struct {
	b, c, d float64
	offset  [3]float64
	pixdim  [3]float64
	qfac    float64
}

// quaternFromAffine decomposes the rotation part of a as in nifti1_io.c
// (nifti_mat44_to_quatern): column norms become pixdim, the polar
// decomposition gives the closest orthogonal matrix, a negative determinant
// sets qfac = -1 and flips the third column, and the rotation becomes a unit
// quaternion with a >= 0 (NIfTI-1 header, "METHOD 2" of the qform comments).
func quaternFromAffine(a volume.Affine) quatern {
	var q quatern
	q.offset = [3]float64{a[0][3], a[1][3], a[2][3]}
	var r [3][3]float64
	for c := 0; c < 3; c++ {
		n := math.Sqrt(a[0][c]*a[0][c] + a[1][c]*a[1][c] + a[2][c]*a[2][c])
		if n == 0 {
			r[c][c], n = 1, 1
		} else {
			for k := 0; k < 3; k++ {
				r[k][c] = a[k][c] / n
			}
		}
		q.pixdim[c] = n
	}
	r = volume.Polar3(r)
	q.qfac = 1
	if volume.Det3(r) < 0 {
		q.qfac = -1
		for k := 0; k < 3; k++ {
			r[k][2] = -r[k][2]
		}
	}
	q.b, q.c, q.d = rotationToQuatern(r)
	return q
}

// rotationToQuatern returns (b, c, d) of the unit quaternion (a, b, c, d),
// a >= 0, of the proper rotation r (nifti_mat44_to_quatern).
func rotationToQuatern(r [3][3]float64) (b, c, d float64) {
	var a float64
	if t := r[0][0] + r[1][1] + r[2][2] + 1; t > 0.5 {
		a = 0.5 * math.Sqrt(t)
		b = 0.25 * (r[2][1] - r[1][2]) / a
		c = 0.25 * (r[0][2] - r[2][0]) / a
		d = 0.25 * (r[1][0] - r[0][1]) / a
	} else {
		xd := 1 + r[0][0] - (r[1][1] + r[2][2])
		yd := 1 + r[1][1] - (r[0][0] + r[2][2])
		zd := 1 + r[2][2] - (r[0][0] + r[1][1])
		switch {
		case xd > 1:
			b = 0.5 * math.Sqrt(xd)
			c = 0.25 * (r[0][1] + r[1][0]) / b
			d = 0.25 * (r[0][2] + r[2][0]) / b
			a = 0.25 * (r[2][1] - r[1][2]) / b
		case yd > 1:
			c = 0.5 * math.Sqrt(yd)
			b = 0.25 * (r[0][1] + r[1][0]) / c
			d = 0.25 * (r[1][2] + r[2][1]) / c
			a = 0.25 * (r[0][2] - r[2][0]) / c
		default:
			d = 0.5 * math.Sqrt(zd)
			b = 0.25 * (r[0][2] + r[2][0]) / d
			c = 0.25 * (r[1][2] + r[2][1]) / d
			a = 0.25 * (r[1][0] - r[0][1]) / d
		}
		if a < 0 {
			b, c, d = -b, -c, -d
		}
	}
	return b, c, d
}
