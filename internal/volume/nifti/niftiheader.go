package nifti

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"strings"

	gonii "github.com/okieraised/gonii/pkg/nifti"

	"brightfold/internal/volume"
)

// Header kinds.
const (
	kindAnalyze = 0 // Analyze 7.5 (SPM2 variant), a .hdr without NIfTI magic
	kindNIfTI1  = 1
	kindNIfTI2  = 2
)

// Header sizes (sizeof_hdr) and the largest header prefix we ever read.
const (
	nifti2HeaderSize = 540
	niftiPrefixLen   = nifti2HeaderSize + 4
)

// niftiHeader is the validated content of a NIfTI-1, NIfTI-2 or Analyze
// header that loading needs.
type niftiHeader struct {
	kind       int
	order      binary.ByteOrder
	single     bool     // data follows the header in the same file (magic n+1 / n+2)
	ndim       int      // dim[0]
	dim        [8]int64 // dim[1..ndim]; entries beyond ndim are 1
	pixdim     [8]float64
	datatype   DataType
	bitpix     int
	voxOffset  int64
	slope      float64 // 1 and 0 when the header asks for no scaling
	inter      float64
	qformCode  int
	sformCode  int
	quatern    [3]float64 // quatern_b, quatern_c, quatern_d
	qoffset    [3]float64
	srow       [3][4]float64
	origin     [3]int16 // Analyze (SPM) originator, 1-based voxel
	descrip    string
	intentCode int
	xyztUnits  int
	glmax      int32 // Analyze: recorded raw range, for SPM2 scaling
	glmin      int32
	calMax     float64
	calMin     float64
}

// spatial returns dim[1..3]; frames the number of 3D frames (dims beyond
// the third, flattened in file order).
func (h *niftiHeader) spatial() [3]int {
	return [3]int{int(h.dim[1]), int(h.dim[2]), int(h.dim[3])}
}

func (h *niftiHeader) frames() int {
	n := 1
	for i := 4; i <= 7; i++ {
		n *= int(h.dim[i])
	}
	return n
}

func (h *niftiHeader) bytesPerVoxel() int { return bitsPerVoxel(h.datatype) / 8 }

// errNIfTIHeader marks a header problem; the caller adds the file name.
var errNIfTIHeader = errors.New("bad NIfTI header")

func niftiHeaderErr(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{errNIfTIHeader}, args...)...)
}

// parseNIfTIHeader decodes and validates the header at the start of b.
// pairHeader says the bytes come from a .hdr file, where a header without
// NIfTI magic is read as Analyze 7.5.
func parseNIfTIHeader(b []byte, pairHeader bool) (*niftiHeader, []string, error) {
	if len(b) < nifti1HeaderSize {
		return nil, nil, niftiHeaderErr("truncated: %d bytes, a NIfTI-1 or Analyze header is %d", len(b), nifti1HeaderSize)
	}
	order, size, err := niftiByteOrder(b)
	if err != nil {
		return nil, nil, err
	}
	var h *niftiHeader
	if size == nifti2HeaderSize {
		if len(b) < nifti2HeaderSize {
			return nil, nil, niftiHeaderErr("truncated: %d bytes, a NIfTI-2 header is %d", len(b), nifti2HeaderSize)
		}
		h, err = decodeNIfTI2(b, order)
	} else {
		h, err = decodeNIfTI1(b, order, pairHeader)
	}
	if err != nil {
		return nil, nil, err
	}
	warn, err := h.validate()
	return h, warn, err
}

// niftiByteOrder finds the byte order from sizeof_hdr (348 for NIfTI-1 and
// Analyze, 540 for NIfTI-2), read both ways.
func niftiByteOrder(b []byte) (binary.ByteOrder, int, error) {
	for _, o := range []binary.ByteOrder{binary.LittleEndian, binary.BigEndian} {
		if s := int32(o.Uint32(b)); s == nifti1HeaderSize || s == nifti2HeaderSize {
			return o, int(s), nil
		}
	}
	return nil, 0, niftiHeaderErr("sizeof_hdr is %d; NIfTI-1 and Analyze headers have 348, NIfTI-2 540",
		int32(binary.LittleEndian.Uint32(b)))
}

// decodeNIfTI1 reads the 348-byte layout through gonii's Nii1Header struct
// (the field layout of nifti1.h); Analyze 7.5 shares the first 148 bytes and
// the positions of descrip, scl_slope (funused1) and scl_inter (funused2).
func decodeNIfTI1(b []byte, order binary.ByteOrder, pairHeader bool) (*niftiHeader, error) {
	var r gonii.Nii1Header
	if err := binary.Read(bytes.NewReader(b[:nifti1HeaderSize]), order, &r); err != nil {
		return nil, niftiHeaderErr("%v", err)
	}
	h := &niftiHeader{order: order, kind: kindNIfTI1}
	switch string(r.Magic[:]) {
	case "n+1\x00":
		h.single = true
	case "ni1\x00":
	default:
		if !pairHeader {
			return nil, niftiHeaderErr("magic is %q, not \"n+1\" (NIfTI-1 single file) nor \"ni1\" (pair)", headerString(r.Magic[:]))
		}
		h.kind = kindAnalyze
	}
	for i := range r.Dim {
		h.dim[i] = int64(r.Dim[i])
		h.pixdim[i] = float64(r.Pixdim[i])
	}
	h.datatype, h.bitpix = DataType(r.Datatype), int(r.Bitpix)
	vo := float64(r.VoxOffset)
	if math.IsNaN(vo) || math.IsInf(vo, 0) || vo < 0 || vo != math.Trunc(vo) || vo > 1<<40 {
		return nil, niftiHeaderErr("vox_offset %v is not a non-negative whole number", vo)
	}
	h.voxOffset = int64(vo)
	h.slope, h.inter = float64(r.SclSlope), float64(r.SclInter)
	h.descrip = headerString(r.Descrip[:])
	h.intentCode = int(r.IntentCode)
	h.xyztUnits = int(r.XyztUnits)
	h.glmax, h.glmin = r.Glmax, r.Glmin
	h.calMax, h.calMin = float64(r.CalMax), float64(r.CalMin)
	if h.kind == kindAnalyze {
		// SPM's originator: int16[5] at byte 253 (spm99analyze.py "origin").
		for i := 0; i < 3; i++ {
			h.origin[i] = int16(order.Uint16(b[253+2*i:]))
		}
		return h, nil
	}
	h.qformCode, h.sformCode = int(r.QformCode), int(r.SformCode)
	h.quatern = [3]float64{float64(r.QuaternB), float64(r.QuaternC), float64(r.QuaternD)}
	h.qoffset = [3]float64{float64(r.QoffsetX), float64(r.QoffsetY), float64(r.QoffsetZ)}
	for c := 0; c < 4; c++ {
		h.srow[0][c], h.srow[1][c], h.srow[2][c] = float64(r.SrowX[c]), float64(r.SrowY[c]), float64(r.SrowZ[c])
	}
	return h, nil
}

// decodeNIfTI2 reads the 540-byte layout through gonii's Nii2Header struct
// (nifti2.h).
func decodeNIfTI2(b []byte, order binary.ByteOrder) (*niftiHeader, error) {
	var r gonii.Nii2Header
	if err := binary.Read(bytes.NewReader(b[:nifti2HeaderSize]), order, &r); err != nil {
		return nil, niftiHeaderErr("%v", err)
	}
	h := &niftiHeader{order: order, kind: kindNIfTI2}
	switch m := string(r.Magic[:]); {
	case m == "n+2\x00\r\n\x1a\n":
		h.single = true
	case m == "ni2\x00\r\n\x1a\n":
	case strings.HasPrefix(m, "n+2\x00") || strings.HasPrefix(m, "ni2\x00"):
		return nil, niftiHeaderErr("NIfTI-2 magic %q is damaged (bytes 4-7 should be \\r\\n\\x1a\\n; a text-mode transfer?)", m)
	default:
		return nil, niftiHeaderErr("magic is %q, not \"n+2\" (NIfTI-2 single file) nor \"ni2\" (pair)", headerString(r.Magic[:]))
	}
	h.dim, h.pixdim = r.Dim, r.Pixdim
	h.datatype, h.bitpix = DataType(r.Datatype), int(r.Bitpix)
	if r.VoxOffset < 0 || r.VoxOffset > 1<<40 {
		return nil, niftiHeaderErr("vox_offset %d is out of range", r.VoxOffset)
	}
	h.voxOffset = r.VoxOffset
	h.slope, h.inter = r.SclSlope, r.SclInter
	h.descrip = headerString(r.Descrip[:])
	h.intentCode = int(r.IntentCode)
	h.xyztUnits = int(r.XyztUnits)
	h.qformCode, h.sformCode = int(r.QformCode), int(r.SformCode)
	h.quatern = [3]float64{r.QuaternB, r.QuaternC, r.QuaternD}
	h.qoffset = [3]float64{r.QoffsetX, r.QoffsetY, r.QoffsetZ}
	h.srow = [3][4]float64{r.SrowX, r.SrowY, r.SrowZ}
	return h, nil
}

// headerString returns the bytes up to the first NUL, with anything but printable
// ASCII replaced by '?', so a hostile header cannot put control codes on a terminal.
func headerString(b []byte) string {
	if i := bytes.IndexByte(b, 0); i >= 0 {
		b = b[:i]
	}
	s := []byte(strings.TrimRight(string(b), " "))
	for i, c := range s {
		if c < 0x20 || c > 0x7e {
			s[i] = '?'
		}
	}
	return string(s)
}

// validate checks dims, datatype, offsets and scaling, fills in the unused
// dims with 1 and returns warnings for oddities that do not stop loading.
func (h *niftiHeader) validate() ([]string, error) {
	var warn []string
	nd := h.dim[0]
	if nd < 1 || nd > 7 {
		return nil, niftiHeaderErr("dim[0] is %d; it must be 1 to 7 (NIfTI-1 header, dim field)", nd)
	}
	h.ndim = int(nd)
	for i := 1; i <= 7; i++ {
		if i > h.ndim {
			h.dim[i] = 1
			continue
		}
		if h.dim[i] < 1 {
			return nil, niftiHeaderErr("dim[%d] is %d; dims must be positive", i, h.dim[i])
		}
		if h.dim[i] > volume.MaxVoxels {
			return nil, niftiHeaderErr("dim[%d] is %d, too large", i, h.dim[i])
		}
	}
	sp := h.spatial()
	if _, err := volume.CheckedProduct(sp[:], volume.MaxVoxels); err != nil {
		return nil, niftiHeaderErr("%v", err)
	}
	all := make([]int, 7)
	for i := range all {
		all[i] = int(h.dim[i+1])
	}
	bpv := bitsPerVoxel(h.datatype) / 8
	if !readableType(h.datatype) {
		return nil, niftiHeaderErr("datatype %d (%s) is not a scalar type Brightfold reads", h.datatype, dataTypeName(h.datatype))
	}
	if _, err := volume.CheckedProduct(append(all, bpv), 1<<50); err != nil {
		return nil, niftiHeaderErr("image size: %v", err)
	}
	if h.bitpix != 8*bpv {
		warn = append(warn, fmt.Sprintf("bitpix is %d but datatype %s has %d bits; using the datatype", h.bitpix, dataTypeName(h.datatype), 8*bpv))
	}
	if h.intentCode >= 3000 && h.intentCode < 3100 {
		return nil, niftiHeaderErr("intent code %d marks CIFTI-2 matrix data, not a volume", h.intentCode)
	}
	if h.single {
		min := int64(nifti1VoxOffset)
		if h.kind == kindNIfTI2 {
			min = nifti2HeaderSize + 4
		}
		if h.voxOffset < min {
			return nil, niftiHeaderErr("vox_offset %d is inside the header; a single file's data starts at %d or later", h.voxOffset, min)
		}
	}
	w, err := h.checkScaling()
	return append(warn, w...), err
}

// checkScaling applies the scl_slope/scl_inter rules: a slope of 0 or not
// finite means no scaling (NIfTI-1 header, scl_slope field; nibabel 5.0
// Nifti1Header.get_slope_inter); a usable slope with a non-finite intercept
// is refused. Analyze follows nibabel's Spm2AnalyzeHeader.get_slope_inter.
func (h *niftiHeader) checkScaling() ([]string, error) {
	s, c := h.slope, h.inter
	usable := s != 0 && !math.IsNaN(s) && !math.IsInf(s, 0)
	if h.kind == kindAnalyze {
		switch {
		case usable:
			if math.IsNaN(c) || math.IsInf(c, 0) {
				c = 0
			}
		case h.glmax != h.glmin && h.calMax != h.calMin:
			s = (h.calMax - h.calMin) / float64(int64(h.glmax)-int64(h.glmin))
			c = h.calMin - s*float64(h.glmin)
		default:
			s, c = 1, 0
		}
		h.slope, h.inter = s, c
		return nil, nil
	}
	if !usable {
		h.slope, h.inter = 1, 0
		return nil, nil
	}
	if math.IsNaN(c) || math.IsInf(c, 0) {
		return nil, niftiHeaderErr("scl_slope is %g but scl_inter is %g", s, c)
	}
	return nil, nil
}

func readableType(dt DataType) bool {
	switch dt {
	case DTUint8, DTInt8, DTInt16, DTUint16, DTInt32, DTUint32, DTFloat32, DTFloat64, DTInt64, DTUint64:
		return true
	}
	return false
}

// dataTypeName names a NIfTI-1 datatype code (nifti1.h NIFTI_TYPE_*).
func dataTypeName(dt DataType) string {
	names := map[DataType]string{
		1: "binary", DTUint8: "uint8", DTInt16: "int16", DTInt32: "int32", DTFloat32: "float32",
		32: "complex64", DTFloat64: "float64", 128: "rgb24", DTInt8: "int8", DTUint16: "uint16",
		DTUint32: "uint32", DTInt64: "int64", DTUint64: "uint64", 1536: "float128",
		1792: "complex128", 2048: "complex256", 2304: "rgba32",
	}
	if n, ok := names[dt]; ok {
		return n
	}
	return "unknown"
}

// affine chooses the voxel-to-world transform as nibabel 5.0's
// get_best_affine does: sform when sform_code is not 0, else qform when
// qform_code is not 0, else the pixdim-only base affine (x flipped, origin at
// the centre). Codes outside 0..5 count as 0, as nibabel's header check
// sets them. Analyze uses the SPM origin field (Spm99AnalyzeHeader.get_origin_affine).
func (h *niftiHeader) affine() (volume.Affine, []string, error) {
	var warn []string
	if h.kind == kindAnalyze {
		a, err := h.originAffine()
		warn = append(warn, "Analyze 7.5 header: orientation is not recorded; assuming the SPM convention (x flipped, LAS)")
		return a, warn, err
	}
	for _, c := range []*int{&h.sformCode, &h.qformCode} {
		if *c < 0 || *c > 5 {
			warn = append(warn, fmt.Sprintf("xform code %d is not valid (0..5); ignoring that transform", *c))
			*c = 0
		}
	}
	var a volume.Affine
	var err error
	switch {
	case h.sformCode != 0:
		a = h.sformAffine()
		if h.qformCode != 0 {
			if q, qerr := h.qformAffine(); qerr == nil && !affinesAgree(a, q) {
				warn = append(warn, "sform and qform disagree; using the sform (NIfTI-1: sform_code > 0 takes precedence)")
			}
		}
	case h.qformCode != 0:
		a, err = h.qformAffine()
	default:
		a, err = h.baseAffine()
		warn = append(warn, "no sform or qform (both codes 0): affine from pixdim with the centre as origin and x flipped, as nibabel does")
	}
	if err != nil {
		return a, warn, err
	}
	if err := a.Validate(); err != nil {
		return a, warn, niftiHeaderErr("transform: %v", err)
	}
	return a, warn, nil
}

func (h *niftiHeader) sformAffine() volume.Affine {
	a := volume.Identity()
	for r := 0; r < 3; r++ {
		a[r] = h.srow[r]
	}
	return a
}

// zooms returns pixdim[1..3], refusing values that are not positive and finite.
// With pad, the zooms of a 1D or 2D image are padded with 1 as nibabel's
// shape_zoom_affine does.
func (h *niftiHeader) zooms(pad bool) ([3]float64, error) {
	var z [3]float64
	for i := 0; i < 3; i++ {
		p := h.pixdim[i+1]
		if pad && i >= h.ndim {
			p = 1
		}
		if !(p > 0) || math.IsInf(p, 0) {
			return z, niftiHeaderErr("pixdim[%d] is %v; voxel sizes must be positive", i+1, p)
		}
		z[i] = p
	}
	return z, nil
}

// quaternionThreshold is nibabel's Nifti1Header.quaternion_threshold,
// -3 float32 epsilons: how far b² + c² + d² may exceed 1 by rounding.
const quaternionThreshold = -3 * 1.1920928955078125e-07

// qformAffine builds the qform from the quaternion (NIfTI-1 header "METHOD 2"):
// a = sqrt(1 - b² - c² - d²), R from (a, b, c, d), columns scaled by pixdim
// and the third by qfac. As in nibabel, qfac is pixdim[0] when that is ±1 and
// 1 otherwise, and b² + c² + d² may exceed 1 only by rounding.
func (h *niftiHeader) qformAffine() (volume.Affine, error) {
	z, err := h.zooms(false)
	if err != nil {
		return volume.Affine{}, err
	}
	b, c, d := h.quatern[0], h.quatern[1], h.quatern[2]
	for _, x := range h.quatern {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return volume.Affine{}, niftiHeaderErr("quatern_b/c/d %v are not finite", h.quatern)
		}
	}
	w2 := 1 - (b*b + c*c + d*d)
	var a float64
	switch {
	case w2 >= 0:
		a = math.Sqrt(w2)
	case w2 < quaternionThreshold:
		return volume.Affine{}, niftiHeaderErr("quatern_b/c/d %v have norm above 1", h.quatern)
	}
	if h.pixdim[0] == -1 {
		z[2] = -z[2]
	}
	n := a*a + b*b + c*c + d*d
	s := 2 / n
	m := volume.Identity()
	m[0][0], m[0][1], m[0][2] = 1-s*(c*c+d*d), s*(b*c-a*d), s*(b*d+a*c)
	m[1][0], m[1][1], m[1][2] = s*(b*c+a*d), 1-s*(b*b+d*d), s*(c*d-a*b)
	m[2][0], m[2][1], m[2][2] = s*(b*d-a*c), s*(c*d+a*b), 1-s*(b*b+c*c)
	for r := 0; r < 3; r++ {
		for k := 0; k < 3; k++ {
			m[r][k] *= z[k]
		}
		m[r][3] = h.qoffset[r]
	}
	return m, nil
}

// baseAffine is nibabel's shape_zoom_affine with x flipped: diag(-dx, dy, dz)
// with the centre voxel (dims-1)/2 at the world origin.
func (h *niftiHeader) baseAffine() (volume.Affine, error) {
	z, err := h.zooms(true)
	if err != nil {
		return volume.Affine{}, err
	}
	return centredAffine(h.spatial(), z, [3]float64{
		(float64(h.dim[1]) - 1) / 2, (float64(h.dim[2]) - 1) / 2, (float64(h.dim[3]) - 1) / 2,
	}), nil
}

// originAffine is nibabel's Spm99AnalyzeHeader.get_origin_affine: the
// 1-based origin field when set and inside (-dims, 2·dims), else the centre.
func (h *niftiHeader) originAffine() (volume.Affine, error) {
	z, err := h.zooms(false)
	if err != nil {
		return volume.Affine{}, err
	}
	dims := h.spatial()
	c := [3]float64{(float64(dims[0]) - 1) / 2, (float64(dims[1]) - 1) / 2, (float64(dims[2]) - 1) / 2}
	set, inside := false, true
	for i, o := range h.origin {
		set = set || o != 0
		inside = inside && int(o) > -dims[i] && int(o) < 2*dims[i]
	}
	if set && inside {
		for i, o := range h.origin {
			c[i] = float64(o) - 1
		}
	}
	return centredAffine(dims, z, c), nil
}

func centredAffine(dims [3]int, z, centre [3]float64) volume.Affine {
	z[0] = -z[0]
	a := volume.Identity()
	for i := 0; i < 3; i++ {
		a[i][i] = z[i]
		a[i][3] = -centre[i] * z[i]
	}
	return a
}

// affinesAgree reports whether two affines match to 1e-3 in the 3×3 part
// (relative to the voxel size) and 0.01 mm in the offset (common practice).
func affinesAgree(a, b volume.Affine) bool {
	sp := a.Spacing()
	for r := 0; r < 3; r++ {
		for c := 0; c < 3; c++ {
			if math.Abs(a[r][c]-b[r][c]) > 1e-3*math.Max(sp[c], 1e-6) {
				return false
			}
		}
		if math.Abs(a[r][3]-b[r][3]) > 0.01 {
			return false
		}
	}
	return true
}

// Len is the number of voxels in one frame.
func (h *niftiHeader) Len() int {
	s := h.spatial()
	return s[0] * s[1] * s[2]
}
