package dicom

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"

	"brightfold/internal/volume"
)

// Limits on header values that size allocations. The pixel data must also
// really hold rows × columns × frames samples before anything is allocated.
const (
	maxDICOMFrames = 1 << 16
	maxDICOMSide   = 1 << 15
)

// dcmFile is the header of one DICOM image file, as far as loading needs it.
type dcmFile struct {
	path   string
	layout dcmLayout

	sopInstance, seriesUID, studyUID string
	seriesNumber, instanceNumber     int
	meta                             volume.Metadata
	patient                          volume.Identifiers

	rows, cols, frames        int
	bitsAllocated, bitsStored int
	signed                    bool
	samples                   int
	photometric               string
	echoTimeMs                float64
	slope, intercept          float64 // top-level RescaleSlope/Intercept (1, 0 when absent)

	// frameGeo holds one entry per frame; err, when set, makes the file
	// unusable (missing geometry, colour, compressed, ...).
	frameGeo []dcmFrame
	err      error
}

// dcmFrame is the geometry and rescale of one frame (slice) of a file.
type dcmFrame struct {
	file               *dcmFile
	index              int        // frame number within the file, from 0
	pos                pvec       // ImagePositionPatient (LPS mm)
	rowDir, colDir     pvec       // ImageOrientationPatient: along a row, down a column
	pixelSpacing       [2]float64 // between rows, between columns (mm)
	slope, intercept   float64
	thickness, spacing float64 // SliceThickness, SpacingBetweenSlices (informational)
}

// errNoPixelData marks a DICOM file that is not an image (a report, a plan, ...).
var errNoPixelData = errors.New("DICOM file without pixel data (7FE0,0010)")

// errGeometry marks an image whose position in the patient is unknown.
var errGeometry = errors.New("image geometry")

// elemMap indexes the elements of a data set or item by tag.
type elemMap map[tag.Tag]*dicom.Element

func indexElements(els []*dicom.Element) elemMap {
	m := make(elemMap, len(els))
	for _, e := range els {
		if _, dup := m[e.Tag]; !dup {
			m[e.Tag] = e
		}
	}
	return m
}

// parseWithLibrary runs suyashkumar/dicom on bytes that passed
// checkDICOMPrefix; a panic inside the library becomes an error.
func parseWithLibrary(data []byte, opts ...dicom.ParseOption) (ds dicom.Dataset, err error) {
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("DICOM reader failed on this file: %v", r)
		}
	}()
	opts = append(opts, dicom.AllowMissingMetaElementGroupLength(), dicom.AllowUnknownSpecificCharacterSet())
	return dicom.Parse(bytes.NewReader(data), int64(len(data)), nil, opts...)
}

// readDICOMHeader checks the structure of a file's bytes and reads its
// header without the pixel data.
func readDICOMHeader(path string, data []byte) (*dcmFile, error) {
	return readDICOMHeaderPrefix(path, data, int64(len(data)))
}

// readDICOMHeaderPrefix is readDICOMHeader on the first bytes of a file of
// size bytes; it returns errNeedWhole when they are not enough.
func readDICOMHeaderPrefix(path string, data []byte, size int64) (*dcmFile, error) {
	lay, err := checkDICOMPrefix(data, size)
	if err != nil {
		return nil, err
	}
	// The library reads the header up to the pixel data, which the walk
	// has already located and checked.
	src := data
	if lay.hasPixelData && !lay.deflated {
		src = data[:lay.pixelStart]
	}
	ds, err := parseWithLibrary(src, dicom.SkipPixelData())
	if err != nil {
		return nil, fmt.Errorf("read header: %w", err)
	}
	f := &dcmFile{path: path, layout: lay}
	f.fill(indexElements(ds.Elements))
	return f, nil
}

// fill copies the header fields; problems that make the file unusable as
// an image go to f.err, so that the file can still be listed in its series.
func (f *dcmFile) fill(m elemMap) {
	f.sopInstance = m.str(tag.SOPInstanceUID)
	f.seriesUID = m.str(tag.SeriesInstanceUID)
	f.studyUID = m.str(tag.StudyInstanceUID)
	f.seriesNumber, _ = m.int(tag.SeriesNumber)
	f.instanceNumber, _ = m.int(tag.InstanceNumber)
	f.fillMeta(m)
	f.patient = volume.Identifiers{
		Name: m.str(tag.PatientName), ID: m.str(tag.PatientID), BirthDate: m.str(tag.PatientBirthDate),
		StudyDate: m.str(tag.StudyDate), Accession: m.str(tag.AccessionNumber), Institution: m.str(tag.InstitutionName),
	}
	f.err = f.fillImage(m)
}

func (f *dcmFile) fillMeta(m elemMap) {
	f.meta = volume.Metadata{
		Format:            "dicom",
		Modality:          m.str(tag.Modality),
		SeriesDescription: m.str(tag.SeriesDescription),
		Manufacturer:      m.str(tag.Manufacturer),
		FieldStrengthT:    m.float(tag.MagneticFieldStrength),
		RepetitionTimeMs:  m.float(tag.RepetitionTime),
		EchoTimeMs:        m.float(tag.EchoTime),
		InversionTimeMs:   m.float(tag.InversionTime),
		FlipAngleDeg:      m.float(tag.FlipAngle),
		SliceThicknessMm:  m.float(tag.SliceThickness),
		NumVolumes:        1,
		Description:       m.str(tag.ImageComments),
		WindowCenter:      m.float(tag.WindowCenter),
		WindowWidth:       m.float(tag.WindowWidth),
		SeriesUID:         m.str(tag.SeriesInstanceUID),
		TransferSyntax:    syntaxName(f.layout.transferSyntax),
	}
	f.echoTimeMs = f.meta.EchoTimeMs
}

// fillImage reads the Image Pixel module (PS3.3 C.7.6.3) and the geometry.
func (f *dcmFile) fillImage(m elemMap) error {
	if !f.layout.hasPixelData {
		return errNoPixelData
	}
	if f.layout.encapsulated && f.layout.codec == "" {
		return errors.New("pixel data is encapsulated (compressed) although the transfer syntax is not")
	}
	if f.layout.codec != "" && !f.layout.encapsulated {
		return fmt.Errorf("the transfer syntax is %s but the pixel data is not encapsulated (PS3.5 A.4)", f.layout.codec)
	}
	var err error
	if f.rows, err = m.need(tag.Rows); err != nil {
		return err
	}
	if f.cols, err = m.need(tag.Columns); err != nil {
		return err
	}
	if f.rows < 1 || f.cols < 1 || f.rows > maxDICOMSide || f.cols > maxDICOMSide {
		return fmt.Errorf("Rows %d × Columns %d is not a usable image size", f.rows, f.cols)
	}
	if f.bitsAllocated, err = m.need(tag.BitsAllocated); err != nil {
		return err
	}
	f.bitsStored, err = m.need(tag.BitsStored)
	if err != nil {
		f.bitsStored = f.bitsAllocated
	}
	pr, _ := m.int(tag.PixelRepresentation)
	f.signed = pr == 1
	f.samples, err = m.int(tag.SamplesPerPixel)
	if err != nil {
		f.samples = 1
	}
	f.photometric = strings.ToUpper(m.str(tag.PhotometricInterpretation))
	f.frames = 1
	if s := m.str(tag.NumberOfFrames); s != "" {
		if f.frames, err = strconv.Atoi(strings.TrimSpace(s)); err != nil {
			return fmt.Errorf("NumberOfFrames (0028,0008) %q is not a number", s)
		}
	}
	if f.frames < 1 || f.frames > maxDICOMFrames {
		return fmt.Errorf("NumberOfFrames (0028,0008) %d is out of range", f.frames)
	}
	if err := f.checkPixelFormat(); err != nil {
		return err
	}
	if f.layout.pixelErr != nil {
		return f.layout.pixelErr
	}
	if err := f.checkPixelLength(); err != nil {
		return err
	}
	f.slope, f.intercept = 1, 0
	if v := m.floats(tag.RescaleSlope); len(v) > 0 {
		f.slope = v[0]
	}
	if v := m.floats(tag.RescaleIntercept); len(v) > 0 {
		f.intercept = v[0]
	}
	if f.frameGeo, err = frameGeometry(m, f); err != nil {
		return fmt.Errorf("%w: %v", errGeometry, err)
	}
	return nil
}

// checkPixelFormat accepts grey-scale native pixels of 1, 8, 16 or 32 bits
// (PS3.3 C.7.6.3.1, PS3.5 8.1.1).
func (f *dcmFile) checkPixelFormat() error {
	if f.samples != 1 {
		return fmt.Errorf("SamplesPerPixel is %d: colour images are not read (grey-scale only)", f.samples)
	}
	switch f.photometric {
	case "MONOCHROME1", "MONOCHROME2", "":
	default:
		return fmt.Errorf("PhotometricInterpretation %s is not grey-scale (MONOCHROME1/2 only)", f.photometric)
	}
	switch f.bitsAllocated {
	case 1, 8, 16, 32:
	default:
		return fmt.Errorf("BitsAllocated %d is not supported (1, 8, 16 or 32)", f.bitsAllocated)
	}
	if f.bitsStored < 1 || f.bitsStored > f.bitsAllocated {
		return fmt.Errorf("BitsStored %d does not fit BitsAllocated %d", f.bitsStored, f.bitsAllocated)
	}
	return nil
}

// pixelBytes is the length rows × columns × frames samples take.
func (f *dcmFile) pixelBytes() int64 {
	n := int64(f.rows) * int64(f.cols) * int64(f.frames)
	if f.bitsAllocated == 1 {
		return (n + 7) / 8
	}
	return n * int64(f.bitsAllocated/8)
}

// checkPixelLength compares the header's image size with the pixel data
// actually present, before anything is allocated.
func (f *dcmFile) checkPixelLength() error {
	switch f.layout.codec {
	case codecRLE:
		return f.checkRLELength()
	case codecJPEGLS:
		return f.checkJPEGLSLength()
	case codecJPEGLossless:
		return f.checkLosslessJPEGLength()
	}
	if need := f.pixelBytes(); f.layout.pixelLength < need {
		return fmt.Errorf("pixel data holds %d bytes, Rows %d × Columns %d × %d frame(s) × %d bits need %d",
			f.layout.pixelLength, f.rows, f.cols, f.frames, f.bitsAllocated, need)
	}
	return nil
}

// frameGeometry reads each frame's position, orientation, spacing and
// rescale: from the Per-frame and Shared Functional Groups (PS3.3 C.7.6.16)
// when present, from the RT Dose grid offsets (PS3.3 C.8.8.3.2), or from
// the single-frame Image Plane module (PS3.3 C.7.6.2).
func frameGeometry(m elemMap, f *dcmFile) ([]dcmFrame, error) {
	if perFrame := m.items(tag.PerFrameFunctionalGroupsSequence); perFrame != nil {
		return functionalGroupFrames(m, f, perFrame)
	}
	base, err := planeFrame(m, m, m, m)
	if err != nil {
		return nil, err
	}
	base.file = f
	if f.frames == 1 {
		return []dcmFrame{base}, nil
	}
	offsets := m.floats(tag.GridFrameOffsetVector)
	if len(offsets) != f.frames {
		return nil, fmt.Errorf("multi-frame image (%d frames) without per-frame geometry "+
			"(no Per-frame Functional Groups Sequence (5200,9230) or GridFrameOffsetVector (3004,000C))", f.frames)
	}
	return gridFrames(base, offsets)
}

// gridFrames places RT Dose frames along the normal (PS3.3 C.8.8.3.2):
// offsets are relative to ImagePositionPatient when the first is 0;
// otherwise, for axial frames only, they are z coordinates.
func gridFrames(base dcmFrame, offsets []float64) ([]dcmFrame, error) {
	n := base.rowDir.cross(base.colDir)
	relative := offsets[0] == 0
	if !relative && (math.Abs(math.Abs(n[2])-1) > 1e-6 || math.Abs(offsets[0]-base.pos[2]) > 1e-3) {
		return nil, errors.New("GridFrameOffsetVector (3004,000C) neither starts at 0 nor gives z coordinates of axial frames")
	}
	out := make([]dcmFrame, len(offsets))
	for i, off := range offsets {
		fr := base
		fr.index = i
		if relative {
			fr.pos = base.pos.add(n.scale(off))
		} else {
			fr.pos[2] = off
		}
		out[i] = fr
	}
	return out, nil
}

// functionalGroupFrames reads frame geometry from the functional groups.
func functionalGroupFrames(m elemMap, f *dcmFile, perFrame []elemMap) ([]dcmFrame, error) {
	if len(perFrame) != f.frames {
		return nil, fmt.Errorf("Per-frame Functional Groups Sequence (5200,9230) has %d items for %d frames", len(perFrame), f.frames)
	}
	var shared elemMap
	if s := m.items(tag.SharedFunctionalGroupsSequence); len(s) > 0 {
		shared = s[0]
	}
	macro := func(frame elemMap, seq tag.Tag) elemMap {
		if it := frame.items(seq); len(it) > 0 {
			return it[0]
		}
		if it := shared.items(seq); len(it) > 0 {
			return it[0]
		}
		return elemMap{}
	}
	out := make([]dcmFrame, f.frames)
	for i, fg := range perFrame {
		fr, err := planeFrame(macro(fg, tag.PlanePositionSequence), macro(fg, tag.PlaneOrientationSequence),
			macro(fg, tag.PixelMeasuresSequence), macro(fg, tag.PixelValueTransformationSequence))
		if err != nil {
			return nil, fmt.Errorf("frame %d: %w", i+1, err)
		}
		fr.file, fr.index = f, i
		out[i] = fr
	}
	return out, nil
}

// planeFrame reads the Image Plane attributes (PS3.3 C.7.6.2) and the
// rescale (PS3.3 C.11.1.1.2) from the given element sets.
func planeFrame(posSet, orientSet, measureSet, rescaleSet elemMap) (dcmFrame, error) {
	var fr dcmFrame
	ipp, err := posSet.vector(tag.ImagePositionPatient, 3)
	if err != nil {
		return fr, err
	}
	iop, err := orientSet.vector(tag.ImageOrientationPatient, 6)
	if err != nil {
		return fr, err
	}
	ps, err := measureSet.vector(tag.PixelSpacing, 2)
	if err != nil {
		return fr, err
	}
	if ps[0] <= 0 || ps[1] <= 0 {
		return fr, fmt.Errorf("PixelSpacing (0028,0030) %v is not positive", ps)
	}
	fr.pos = pvec{ipp[0], ipp[1], ipp[2]}
	fr.rowDir, fr.colDir = pvec{iop[0], iop[1], iop[2]}, pvec{iop[3], iop[4], iop[5]}
	if err := checkOrientation(fr.rowDir, fr.colDir); err != nil {
		return fr, err
	}
	fr.rowDir, fr.colDir = fr.rowDir.scale(1/fr.rowDir.norm()), fr.colDir.scale(1/fr.colDir.norm())
	fr.pixelSpacing = [2]float64{ps[0], ps[1]}
	fr.thickness = measureSet.float(tag.SliceThickness)
	fr.spacing = measureSet.float(tag.SpacingBetweenSlices)
	fr.slope, fr.intercept = 1, 0
	if s := rescaleSet.floats(tag.RescaleSlope); len(s) > 0 {
		fr.slope = s[0]
	}
	if s := rescaleSet.floats(tag.RescaleIntercept); len(s) > 0 {
		fr.intercept = s[0]
	}
	if !dcmFinite(fr.slope) || !dcmFinite(fr.intercept) || fr.slope == 0 {
		return fr, fmt.Errorf("RescaleSlope %v / RescaleIntercept %v unusable", fr.slope, fr.intercept)
	}
	return fr, nil
}

// checkOrientation wants two unit, perpendicular direction cosines
// (PS3.3 C.7.6.2.1.1), allowing for rounding in their decimal strings.
func checkOrientation(r, c pvec) error {
	nr, nc := r.norm(), c.norm()
	if math.Abs(nr-1) > 1e-3 || math.Abs(nc-1) > 1e-3 {
		return fmt.Errorf("ImageOrientationPatient (0020,0037) %v, %v: direction cosines are not unit vectors", r, c)
	}
	if math.Abs(r.dot(c)/(nr*nc)) > 1e-3 {
		return fmt.Errorf("ImageOrientationPatient (0020,0037) %v, %v: row and column directions are not perpendicular", r, c)
	}
	return nil
}

func dcmFinite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// str returns the first value of a string element, trimmed; "" when absent.
func (m elemMap) str(t tag.Tag) string {
	e := m[t]
	if e == nil || e.Value == nil || e.Value.ValueType() != dicom.Strings {
		return ""
	}
	v, _ := e.Value.GetValue().([]string)
	if len(v) == 0 {
		return ""
	}
	return strings.TrimSpace(dcmPrintable(v[0]))
}

// strs returns every value of a string element.
func (m elemMap) strs(t tag.Tag) []string {
	e := m[t]
	if e == nil || e.Value == nil || e.Value.ValueType() != dicom.Strings {
		return nil
	}
	v, _ := e.Value.GetValue().([]string)
	return v
}

// int reads an integer element stored as US/SS/UL/SL or as IS text.
func (m elemMap) int(t tag.Tag) (int, error) {
	e := m[t]
	if e == nil || e.Value == nil {
		return 0, fmt.Errorf("%s is missing", dcmTagName(t))
	}
	switch e.Value.ValueType() {
	case dicom.Ints:
		if v, _ := e.Value.GetValue().([]int); len(v) > 0 {
			return v[0], nil
		}
	case dicom.Strings:
		if s := m.str(t); s != "" {
			if n, err := strconv.Atoi(s); err == nil {
				return n, nil
			}
		}
	}
	return 0, fmt.Errorf("%s has no usable integer value", dcmTagName(t))
}

// need is int for a required element.
func (m elemMap) need(t tag.Tag) (int, error) { return m.int(t) }

// floats reads a DS/IS/FL/FD element; unparsable values make it empty.
func (m elemMap) floats(t tag.Tag) []float64 {
	e := m[t]
	if e == nil || e.Value == nil {
		return nil
	}
	switch e.Value.ValueType() {
	case dicom.Floats:
		v, _ := e.Value.GetValue().([]float64)
		return v
	case dicom.Ints:
		v, _ := e.Value.GetValue().([]int)
		out := make([]float64, len(v))
		for i, x := range v {
			out[i] = float64(x)
		}
		return out
	case dicom.Strings:
		ss := m.strs(t)
		out := make([]float64, 0, len(ss))
		for _, s := range ss {
			x, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
			if err != nil {
				return nil
			}
			out = append(out, x)
		}
		return out
	}
	return nil
}

// float is the first finite value of a numeric element, or 0.
func (m elemMap) float(t tag.Tag) float64 {
	v := m.floats(t)
	if len(v) == 0 || !dcmFinite(v[0]) {
		return 0
	}
	return v[0]
}

// vector reads exactly n finite numbers.
func (m elemMap) vector(t tag.Tag, n int) ([]float64, error) {
	e := m[t]
	if e == nil {
		return nil, fmt.Errorf("%s is missing", dcmTagName(t))
	}
	v := m.floats(t)
	if len(v) != n {
		return nil, fmt.Errorf("%s holds %d numbers, not %d", dcmTagName(t), len(v), n)
	}
	for _, x := range v {
		if !dcmFinite(x) {
			return nil, fmt.Errorf("%s holds %v", dcmTagName(t), x)
		}
	}
	return v, nil
}

// items returns the items of a sequence element as indexed element sets.
func (m elemMap) items(t tag.Tag) []elemMap {
	e := m[t]
	if e == nil || e.Value == nil || e.Value.ValueType() != dicom.Sequences {
		return nil
	}
	seq, _ := e.Value.GetValue().([]*dicom.SequenceItemValue)
	out := make([]elemMap, 0, len(seq))
	for _, it := range seq {
		els, _ := it.GetValue().([]*dicom.Element)
		out = append(out, indexElements(els))
	}
	return out
}
