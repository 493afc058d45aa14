package dicom

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"math/big"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"

	"brightfold/internal/atomicfile"
	"brightfold/internal/notice"
	"brightfold/internal/volume"
)

// MRImageStorage is the SOP Class UID of MR Image Storage (DICOM PS3.4 B.5).
const MRImageStorage = "1.2.840.10008.5.1.4.1.1.4"

// CTImageStorage is the SOP Class UID of CT Image Storage (DICOM PS3.4 B.5).
const CTImageStorage = "1.2.840.10008.5.1.4.1.1.2"

// explicitVRLittleEndian is the transfer syntax WriteSeries uses (PS3.5 A.2).
const explicitVRLittleEndian = "1.2.840.10008.1.2.1"

// uidRoot is the fixed root of every UID Brightfold makes: "2.25" followed by
// a 128-bit integer derived from a hash, as PS3.5 B.2 allows for UIDs made
// from a UUID without a registered root.
const uidRoot = "2.25."

// implementationName is written as ImplementationVersionName (0002,0013).
const implementationName = "BRIGHTFOLD1"

// WriteOptions describe the series that WriteSeries writes. Only
// Seed is required; identifiers are written as given, so pass fictional ones.
type WriteOptions struct {
	// Seed makes the UIDs: the same seed gives the same Study, Series, Frame
	// of Reference and SOP Instance UIDs. Use the case code and the series
	// name, e.g. "HMRU-0001/T1".
	Seed string
	// StudySeed, when set, derives the Study UID instead of Seed, so that
	// several series can share one study.
	StudySeed string

	PatientName      string // e.g. "DEMO^SUBJECT0001"
	PatientID        string // e.g. the case code "HMRU-0001"
	PatientBirthDate string // YYYYMMDD or empty
	PatientSex       string // "M", "F", "O" or empty
	PatientAge       string // e.g. "071Y" or empty
	StudyDate        string // YYYYMMDD or empty
	StudyTime        string // HHMMSS or empty
	AccessionNumber  string
	StudyID          string
	StudyDescription string

	// Modality is "MR" (MR Image Storage) or "CT" (CT Image Storage, the
	// voxel values taken as Hounsfield units); empty means the volume's
	// Meta.Modality when that is "CT", else "MR". Any other value is refused.
	Modality          string
	Manufacturer      string
	ManufacturerModel string
	InstitutionName   string
	SeriesDescription string
	SeriesNumber      int // default 1
	ProtocolName      string
	BodyPartExamined  string // default "HEAD"

	// MR only: MagneticFieldStrength (0018,0087) in tesla, RepetitionTime,
	// EchoTime, InversionTime and FlipAngle; not written for CT.
	FieldStrengthT   float64
	RepetitionTimeMs float64
	EchoTimeMs       float64
	InversionTimeMs  float64
	FlipAngleDeg     float64
	// KVP is CT only: KVP (0018,0060), the peak kilovoltage; 0 writes it
	// empty (type 2 in the CT Image Module, PS3.3 C.8.2.1).
	KVP float64
	// SliceThicknessMm is written as SliceThickness (0018,0050); 0 means the
	// slice spacing.
	SliceThicknessMm float64
	// WindowCenter and WindowWidth (0028,1050/1051); both 0 means none.
	WindowCenter, WindowWidth float64
}

// WriteSeries writes v as an MR Image Storage series (or CT Image
// Storage when the modality is CT, see WriteOptions.Modality) into dir
// (created when missing), one file per slice k named IM0001.dcm,
// IM0002.dcm, ... in explicit VR little endian. Pixels are int16 or uint16
// with RescaleSlope and RescaleIntercept chosen so that integer data
// round-trips exactly and other data keeps 16 bits of precision. Geometry comes from v.Affine (RAS,
// converted to the LPS patient frame of PS3.3 C.7.6.2.1.1). The same volume
// and options always give the same bytes. Each file is written atomically.
func WriteSeries(dir string, v *volume.Volume, opts WriteOptions) error {
	if opts.Seed == "" {
		return errors.New("write DICOM series: WriteOptions.Seed is empty")
	}
	if err := checkWritable(v); err != nil {
		return fmt.Errorf("write DICOM series: %w", err)
	}
	geo, err := lpsGeometry(v.Affine)
	if err != nil {
		return fmt.Errorf("write DICOM series: %w", err)
	}
	enc, err := chooseEncoding(v.Data)
	if err != nil {
		return fmt.Errorf("write DICOM series: %w", err)
	}
	mod, err := seriesModality(opts.Modality, v.Meta.Modality)
	if err != nil {
		return fmt.Errorf("write DICOM series: %w", err)
	}
	opts.Modality = mod
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("write DICOM series: %w", err)
	}
	series := newSeriesHeader(v, geo, enc, opts)
	nx, ny := v.Dims[0], v.Dims[1]
	for k := 0; k < v.Dims[2]; k++ {
		pix := enc.encode(v.Data[k*nx*ny : (k+1)*nx*ny])
		ds, err := series.slice(k, pix)
		if err != nil {
			return fmt.Errorf("write DICOM series: slice %d: %w", k, err)
		}
		var buf bytes.Buffer
		if err := dicom.Write(&buf, ds); err != nil {
			return fmt.Errorf("write DICOM series: encode slice %d: %w", k, err)
		}
		name := filepath.Join(dir, fmt.Sprintf("IM%04d.dcm", k+1))
		if err := atomicfile.WriteBytes(name, buf.Bytes()); err != nil {
			return fmt.Errorf("write DICOM series: %w", err)
		}
	}
	return nil
}

// seriesModality is the Modality to write: opts, else the volume's when it
// is CT, else MR. Only MR and CT have a SOP class here.
func seriesModality(opts, vol string) (string, error) {
	m := strings.ToUpper(strings.TrimSpace(opts))
	if m == "" {
		m = "MR"
		if strings.EqualFold(strings.TrimSpace(vol), "CT") {
			m = "CT"
		}
	}
	if m != "MR" && m != "CT" {
		return "", fmt.Errorf("modality %q: this writer makes MR Image Storage or CT Image Storage only", opts)
	}
	return m, nil
}

func checkWritable(v *volume.Volume) error {
	if v == nil {
		return errors.New("no volume")
	}
	for i, d := range v.Dims {
		if d < 1 || (i < 2 && d > 65535) {
			return fmt.Errorf("dims %v cannot be written as DICOM slices", v.Dims)
		}
	}
	if len(v.Data) != v.Len() {
		return fmt.Errorf("volume holds %d voxels, dims %v need %d", len(v.Data), v.Dims, v.Len())
	}
	if v.Dims[2] > 9999 {
		return fmt.Errorf("%d slices is more than this writer numbers (9999)", v.Dims[2])
	}
	return v.Affine.Validate()
}

// lpsFrame is the DICOM geometry of a volume: direction cosines of a row
// (increasing column index) and of a column (increasing row index), the
// pixel spacing (row spacing, column spacing) and the LPS position of each
// slice's first voxel.
type lpsFrame struct {
	rowDir, colDir pvec
	pixelSpacing   [2]float64 // PixelSpacing (0028,0030): between rows, between columns
	origin         pvec
	sliceStep      pvec // LPS vector from slice k to k+1
}

// lpsGeometry converts a voxel → RAS affine into DICOM geometry: LPS is RAS
// with x and y negated (PS3.3 C.7.6.2.1.1 defines the patient frame as LPS).
// Voxel axis i runs along a row (the column index), j down a column.
func lpsGeometry(a volume.Affine) (lpsFrame, error) {
	var col [3]pvec
	var g lpsFrame
	for c := 0; c < 3; c++ {
		col[c] = pvec{-a[0][c], -a[1][c], a[2][c]}
	}
	g.origin = pvec{-a[0][3], -a[1][3], a[2][3]}
	si, sj := col[0].norm(), col[1].norm()
	if si == 0 || sj == 0 {
		return g, errors.New("affine has a zero in-plane axis")
	}
	g.rowDir = col[0].scale(1 / si)
	g.colDir = col[1].scale(1 / sj)
	if c := math.Abs(g.rowDir.dot(g.colDir)); c > 1e-4 {
		return g, fmt.Errorf("in-plane axes are not perpendicular (cosine %.3g); DICOM cannot store this", c)
	}
	g.pixelSpacing = [2]float64{sj, si}
	g.sliceStep = col[2]
	return g, nil
}

// pixelEncoding maps float voxel values to 16-bit stored values:
// value = stored*slope + intercept (PS3.3 C.11.1.1.2).
type pixelEncoding struct {
	signed           bool
	slope, intercept float64
	slopeDS, interDS string
}

// chooseEncoding picks int16 or uint16 storage and a rescale. Integer data
// that fits is stored as is (slope 1, intercept 0); anything else is spread
// over the 65536 uint16 levels between its minimum and maximum.
func chooseEncoding(data []float32) (pixelEncoding, error) {
	lo, hi := math.Inf(1), math.Inf(-1)
	integral := true
	for _, x := range data {
		f := float64(x)
		if math.IsNaN(f) || math.IsInf(f, 0) {
			return pixelEncoding{}, fmt.Errorf("voxel value %v is not finite", x)
		}
		lo, hi = math.Min(lo, f), math.Max(hi, f)
		if integral && f != math.Trunc(f) {
			integral = false
		}
	}
	if len(data) == 0 {
		lo, hi = 0, 0
	}
	switch {
	case integral && lo >= math.MinInt16 && hi <= math.MaxInt16:
		return newEncoding(true, 1, 0), nil
	case integral && lo >= 0 && hi <= math.MaxUint16:
		return newEncoding(false, 1, 0), nil
	case integral && hi-lo <= math.MaxUint16:
		return newEncoding(false, 1, lo), nil
	}
	slope := (hi - lo) / math.MaxUint16
	if slope == 0 {
		slope = 1
	}
	// DS values hold at most 16 characters (PS3.5 6.2): quantise against the
	// values as written so that a reader gets exactly what we computed.
	enc := newEncoding(false, slope, lo)
	if enc.slope*math.MaxUint16+enc.intercept < hi {
		enc = newEncoding(false, math.Nextafter(enc.slope*1.0000001, math.Inf(1)), lo)
	}
	return enc, nil
}

func newEncoding(signed bool, slope, intercept float64) pixelEncoding {
	e := pixelEncoding{signed: signed}
	e.slopeDS, e.slope = formatDS(slope)
	e.interDS, e.intercept = formatDS(intercept)
	return e
}

// formatDS formats f as a decimal string of at most 16 characters (PS3.5
// 6.2, VR DS) and returns the value that string parses back to.
func formatDS(f float64) (string, float64) {
	for prec := 15; prec > 0; prec-- {
		s := strconv.FormatFloat(f, 'g', prec, 64)
		if len(s) <= 16 {
			back, _ := strconv.ParseFloat(s, 64)
			return s, back
		}
	}
	return "0", 0
}

// encode turns one slice of voxel values into little-endian 16-bit words.
func (e pixelEncoding) encode(vals []float32) []byte {
	out := make([]byte, 2*len(vals))
	for i, x := range vals {
		s := math.Round((float64(x) - e.intercept) / e.slope)
		var w uint16
		if e.signed {
			w = uint16(int16(dcmClamp(s, math.MinInt16, math.MaxInt16)))
		} else {
			w = uint16(dcmClamp(s, 0, math.MaxUint16))
		}
		binary.LittleEndian.PutUint16(out[2*i:], w)
	}
	return out
}

func dcmClamp(x, lo, hi float64) float64 { return math.Max(lo, math.Min(hi, x)) }

// seriesHeader holds what every slice file of a series shares.
type seriesHeader struct {
	opts                    WriteOptions
	sopClass                string
	geo                     lpsFrame
	enc                     pixelEncoding
	rows, cols              int
	studyUID, seriesUID     string
	frameUID, implUID       string
	thickness, spacingSlice float64
	shared                  []*dicom.Element
}

// newSeriesHeader expects opts.Modality to be "MR" or "CT" (seriesModality).
func newSeriesHeader(v *volume.Volume, geo lpsFrame, enc pixelEncoding, opts WriteOptions) *seriesHeader {
	if opts.SeriesNumber == 0 {
		opts.SeriesNumber = 1
	}
	if opts.BodyPartExamined == "" {
		opts.BodyPartExamined = "HEAD"
	}
	studySeed := opts.StudySeed
	if studySeed == "" {
		studySeed = opts.Seed
	}
	h := &seriesHeader{
		opts: opts, geo: geo, enc: enc, sopClass: MRImageStorage,
		rows: v.Dims[1], cols: v.Dims[0],
		studyUID:  DeriveUID(studySeed, "study"),
		seriesUID: DeriveUID(opts.Seed, "series"),
		frameUID:  DeriveUID(studySeed, "frame-of-reference"),
		implUID:   DeriveUID("brightfold", "implementation"),
	}
	if opts.Modality == "CT" {
		h.sopClass = CTImageStorage
	}
	h.spacingSlice = geo.sliceStep.norm()
	h.thickness = opts.SliceThicknessMm
	if h.thickness <= 0 {
		h.thickness = h.spacingSlice
	}
	h.shared = h.sharedElements()
	return h
}

// DeriveUID makes a deterministic UID under Brightfold's root ("2.25.") from
// a seed and a purpose: the first 128 bits of SHA-256 as a decimal integer.
func DeriveUID(seed, purpose string) string {
	sum := sha256.Sum256([]byte("brightfold-uid\x00" + seed + "\x00" + purpose))
	n := new(big.Int).SetBytes(sum[:16])
	return uidRoot + n.String()
}

// sharedElements are the elements every slice of the series has: the
// modules common to the MR Image and CT Image IODs (PS3.3 A.4 and A.3),
// then the MR Image Module (C.8.3.1) or the CT Image Module (C.8.2.1).
func (h *seriesHeader) sharedElements() []*dicom.Element {
	o := h.opts
	pr := 0
	if h.enc.signed {
		pr = 1
	}
	els := []*dicom.Element{
		dcmStr(tag.SpecificCharacterSet, "ISO_IR 192"),
		dcmStr(tag.SOPClassUID, h.sopClass),
		dcmStr(tag.StudyDate, o.StudyDate), dcmStr(tag.SeriesDate, o.StudyDate), dcmStr(tag.ContentDate, o.StudyDate),
		dcmStr(tag.StudyTime, o.StudyTime), dcmStr(tag.SeriesTime, o.StudyTime), dcmStr(tag.ContentTime, o.StudyTime),
		dcmStr(tag.AccessionNumber, o.AccessionNumber),
		dcmStr(tag.Modality, o.Modality),
		dcmStr(tag.Manufacturer, o.Manufacturer),
		dcmStr(tag.InstitutionName, o.InstitutionName),
		dcmStr(tag.ReferringPhysicianName, ""),
		dcmStr(tag.StudyDescription, o.StudyDescription),
		dcmStr(tag.SeriesDescription, o.SeriesDescription),
		dcmStr(tag.ManufacturerModelName, o.ManufacturerModel),
		dcmStr(tag.PatientName, o.PatientName),
		dcmStr(tag.PatientID, o.PatientID),
		dcmStr(tag.PatientBirthDate, o.PatientBirthDate),
		dcmStr(tag.PatientSex, o.PatientSex),
		dcmStr(tag.PatientAge, o.PatientAge),
		dcmStr(tag.BodyPartExamined, o.BodyPartExamined),
		dcmStr(tag.SliceThickness, dcmDS(h.thickness)),
		dcmStr(tag.ProtocolName, o.ProtocolName),
		dcmStr(tag.PatientPosition, "HFS"),
		dcmStr(tag.StudyInstanceUID, h.studyUID),
		dcmStr(tag.SeriesInstanceUID, h.seriesUID),
		dcmStr(tag.StudyID, o.StudyID),
		dcmStr(tag.SeriesNumber, strconv.Itoa(o.SeriesNumber)),
		dcmStr(tag.ImageOrientationPatient, dcmDS(h.geo.rowDir[0]), dcmDS(h.geo.rowDir[1]), dcmDS(h.geo.rowDir[2]),
			dcmDS(h.geo.colDir[0]), dcmDS(h.geo.colDir[1]), dcmDS(h.geo.colDir[2])),
		dcmStr(tag.FrameOfReferenceUID, h.frameUID),
		dcmStr(tag.PositionReferenceIndicator, ""),
		dcmStr(tag.ImageComments, notice.Full),
		dcmInts(tag.SamplesPerPixel, 1),
		dcmStr(tag.PhotometricInterpretation, "MONOCHROME2"),
		dcmInts(tag.Rows, h.rows),
		dcmInts(tag.Columns, h.cols),
		dcmStr(tag.PixelSpacing, dcmDS(h.geo.pixelSpacing[0]), dcmDS(h.geo.pixelSpacing[1])),
		dcmInts(tag.BitsAllocated, 16),
		dcmInts(tag.BitsStored, 16),
		dcmInts(tag.HighBit, 15),
		dcmInts(tag.PixelRepresentation, pr),
		dcmStr(tag.BurnedInAnnotation, "NO"),
		dcmStr(tag.RescaleIntercept, h.enc.interDS),
		dcmStr(tag.RescaleSlope, h.enc.slopeDS),
	}
	if h.sopClass == CTImageStorage {
		els = append(els, h.ctElements()...)
	} else {
		els = append(els, h.mrElements()...)
	}
	if o.WindowWidth > 0 {
		els = append(els, dcmStr(tag.WindowCenter, dcmDS(o.WindowCenter)), dcmStr(tag.WindowWidth, dcmDS(o.WindowWidth)))
	}
	return els
}

// mrElements are the MR-specific elements (MR Image Module, PS3.3 C.8.3.1),
// with the image type and rescale type MR series have always had here.
func (h *seriesHeader) mrElements() []*dicom.Element {
	o := h.opts
	els := []*dicom.Element{
		dcmStr(tag.ImageType, "DERIVED", "SECONDARY"),
		dcmStr(tag.ScanningSequence, "GR"),
		dcmStr(tag.SequenceVariant, "SP"),
		dcmStr(tag.ScanOptions, ""),
		dcmStr(tag.MRAcquisitionType, "3D"),
		dcmStr(tag.RepetitionTime, dcmDSOpt(o.RepetitionTimeMs)),
		dcmStr(tag.EchoTime, dcmDSOpt(o.EchoTimeMs)),
		dcmStr(tag.MagneticFieldStrength, dcmDSOpt(o.FieldStrengthT)),
		dcmStr(tag.SpacingBetweenSlices, dcmDS(h.spacingSlice)),
		dcmStr(tag.EchoTrainLength, ""),
		dcmStr(tag.FlipAngle, dcmDSOpt(o.FlipAngleDeg)),
		dcmStr(tag.RescaleType, "US"),
	}
	if o.InversionTimeMs > 0 {
		els = append(els, dcmStr(tag.InversionTime, dcmDS(o.InversionTimeMs)))
	}
	return els
}

// ctElements are the CT Image Module's attributes (PS3.3 C.8.2.1) beyond
// the shared ones: Image Type (type 1) with value 3 AXIAL (C.8.2.1.1.1),
// KVP and Acquisition Number (type 2, empty when unknown), and Rescale Type
// HU (type 1C: required unless the units are HU, and may be present then).
// The shared pixel attributes meet C.8.2.1.1: one sample, MONOCHROME2, 16
// bits allocated, 16 stored, high bit 15.
func (h *seriesHeader) ctElements() []*dicom.Element {
	return []*dicom.Element{
		dcmStr(tag.ImageType, "DERIVED", "SECONDARY", "AXIAL"),
		dcmStr(tag.KVP, dcmDSOpt(h.opts.KVP)),
		dcmStr(tag.AcquisitionNumber, ""),
		dcmStr(tag.RescaleType, "HU"),
	}
}

// slice builds the dataset of slice k with its stored pixel bytes.
func (h *seriesHeader) slice(k int, pix []byte) (dicom.Dataset, error) {
	sop := DeriveUID(h.opts.Seed, "instance-"+strconv.Itoa(k+1))
	pos := h.geo.origin.add(h.geo.sliceStep.scale(float64(k)))
	normal := h.geo.rowDir.cross(h.geo.colDir)
	els := []*dicom.Element{
		dcmBytes(tag.FileMetaInformationVersion, []byte{0, 1}),
		dcmStr(tag.MediaStorageSOPClassUID, h.sopClass),
		dcmStr(tag.MediaStorageSOPInstanceUID, sop),
		dcmStr(tag.TransferSyntaxUID, explicitVRLittleEndian),
		dcmStr(tag.ImplementationClassUID, h.implUID),
		dcmStr(tag.ImplementationVersionName, implementationName),
		dcmStr(tag.SOPInstanceUID, sop),
		dcmStr(tag.InstanceNumber, strconv.Itoa(k+1)),
		dcmStr(tag.ImagePositionPatient, dcmDS(pos[0]), dcmDS(pos[1]), dcmDS(pos[2])),
		dcmStr(tag.SliceLocation, dcmDS(pos.dot(normal))),
	}
	pixel, err := dicom.NewElement(tag.PixelData, dicom.PixelDataInfo{
		IntentionallyUnprocessed: true,
		UnprocessedValueData:     pix,
	})
	if err != nil {
		return dicom.Dataset{}, err
	}
	els = append(els, h.shared...)
	els = append(els, pixel)
	for _, e := range els {
		if e == nil {
			return dicom.Dataset{}, errors.New("internal: element could not be built")
		}
	}
	// Elements of a data set are in ascending tag order (PS3.5 7.1).
	sort.SliceStable(els, func(a, b int) bool { return dcmTagLess(els[a].Tag, els[b].Tag) })
	return dicom.Dataset{Elements: els}, nil
}

func dcmTagLess(a, b tag.Tag) bool {
	if a.Group != b.Group {
		return a.Group < b.Group
	}
	return a.Element < b.Element
}

// el makes a string-valued element; the library pads odd lengths. An empty
// value list gives a zero-length (type 2) element.
func dcmStr(t tag.Tag, vals ...string) *dicom.Element {
	if len(vals) == 0 {
		vals = []string{""}
	}
	for i := range vals {
		vals[i] = strings.TrimSpace(vals[i])
	}
	e, err := dicom.NewElement(t, vals)
	if err != nil {
		return nil
	}
	return e
}

func dcmInts(t tag.Tag, vals ...int) *dicom.Element {
	e, err := dicom.NewElement(t, vals)
	if err != nil {
		return nil
	}
	return e
}

func dcmBytes(t tag.Tag, b []byte) *dicom.Element {
	e, err := dicom.NewElement(t, b)
	if err != nil {
		return nil
	}
	return e
}

// ds formats a decimal string value (at most 16 characters, PS3.5 6.2).
func dcmDS(f float64) string {
	if f == 0 || math.Abs(f) < 1e-12 {
		return "0"
	}
	s, _ := formatDS(f)
	return s
}

// dsOpt is ds, or empty for zero (unknown).
func dcmDSOpt(f float64) string {
	if f == 0 {
		return ""
	}
	return dcmDS(f)
}

// pvec is a vector in the LPS patient frame.
type pvec [3]float64

func (a pvec) dot(b pvec) float64   { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] }
func (a pvec) norm() float64        { return math.Sqrt(a.dot(a)) }
func (a pvec) scale(s float64) pvec { return pvec{a[0] * s, a[1] * s, a[2] * s} }
func (a pvec) add(b pvec) pvec      { return pvec{a[0] + b[0], a[1] + b[1], a[2] + b[2]} }
func (a pvec) sub(b pvec) pvec      { return pvec{a[0] - b[0], a[1] - b[1], a[2] - b[2]} }
func (a pvec) cross(b pvec) pvec {
	return pvec{a[1]*b[2] - a[2]*b[1], a[2]*b[0] - a[0]*b[2], a[0]*b[1] - a[1]*b[0]}
}
