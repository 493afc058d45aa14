package dicom

import (
	"bytes"
	"compress/flate"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"strings"

	"github.com/suyashkumar/dicom/pkg/tag"
	"github.com/suyashkumar/dicom/pkg/uid"
)

// Transfer syntaxes whose pixel data is stored natively (DICOM PS3.5 A.1–A.5).
const (
	tsImplicitLE = "1.2.840.10008.1.2"
	tsExplicitLE = "1.2.840.10008.1.2.1"
	tsDeflatedLE = "1.2.840.10008.1.2.1.99"
	tsExplicitBE = "1.2.840.10008.1.2.2"
	// tsRLE is RLE Lossless (PS3.5 A.4.2, Annex G): an explicit VR little
	// endian data set with encapsulated pixel data, decoded by decodeRLEFrame.
	tsRLE = "1.2.840.10008.1.2.5"
	// tsJPEGLS is JPEG-LS Lossless (PS3.5 A.4.3): explicit VR little endian
	// with encapsulated ITU-T T.87 frames, decoded by decodeJPEGLS.
	tsJPEGLS = "1.2.840.10008.1.2.4.80"
	// tsJPEGLossless and tsJPEGLosslessSV1 are JPEG Lossless, Process 14,
	// any predictor or first-order prediction (PS3.5 A.4.1): ITU-T T.81
	// Annex H frames, decoded by decodeLosslessJPEG.
	tsJPEGLossless    = "1.2.840.10008.1.2.4.57"
	tsJPEGLosslessSV1 = "1.2.840.10008.1.2.4.70"
)

// Codecs of encapsulated pixel data that are decoded.
const (
	codecRLE          = "RLE Lossless"
	codecJPEGLS       = "JPEG-LS Lossless"
	codecJPEGLossless = "JPEG Lossless"
)

// maxDICOMNesting bounds sequence nesting; real files rarely pass 6 levels.
const maxDICOMNesting = 16

// maxInflated bounds the inflated size of a deflated data set: 160 MiB
// holds the default voxel limit (32 Mi voxels) at 32 bits plus the header.
// The size is counted before anything is kept (dcmInflate).
const maxInflated = 160 << 20

// errNotDICOM marks a file that lacks the PS3.10 preamble and "DICM" prefix.
var errNotDICOM = errors.New("not a DICOM file (no \"DICM\" at byte 128, DICOM PS3.10 7.1)")

// dcmLayout is what the structure check learns about a file.
type dcmLayout struct {
	transferSyntax string
	bigEndian      bool
	implicit       bool
	deflated       bool
	hasPixelData   bool   // a top-level PixelData (7FE0,0010) element
	encapsulated   bool   // PixelData of undefined length (compressed)
	codec          string // codecRLE or codecJPEGLS for those syntaxes; "" for native ones
	fragmentBytes  int64  // total length of the encapsulated items after the offset table
	pixelLength    int64  // value length of PixelData when defined
	pixelErr       error  // PixelData runs past the end of the file
	pixelStart     int    // offset of the PixelData element's header in the file
}

// errNeedWhole asks for the whole file: a prefix did not settle the check.
var errNeedWhole = errors.New("the file's first bytes do not settle its structure")

// checkDICOMPrefix walks every element of a DICOM file the way
// suyashkumar/dicom v1.1.0 will read it, and refuses anything that would
// make that reader allocate more than the file holds, recurse without
// bound, or panic: lengths past the end of their container, undefined
// lengths where none may be, items that are not items, deep nesting. It
// also reports the transfer syntax and where the pixel data is.
//
// data is the whole file or its first bytes, of a file of size bytes. A
// prefix is enough when the walk reaches top-level native pixel data that
// runs exactly to the end of the file; otherwise (any problem, a deflated
// data set, elements after the pixel data) it returns errNeedWhole and the
// caller checks the whole file.
func checkDICOMPrefix(data []byte, size int64) (dcmLayout, error) {
	prefix := int64(len(data)) < size
	lay, done, err := walkDICOM(data, size)
	if prefix && (err != nil || !done) && !(errors.Is(err, errNotDICOM) && len(data) >= 132) {
		return lay, errNeedWhole
	}
	return lay, err
}

func walkDICOM(data []byte, size int64) (dcmLayout, bool, error) {
	var lay dcmLayout
	if len(data) < 132 || string(data[128:132]) != "DICM" {
		return lay, false, bareDataSet(data, size)
	}
	meta := &dcmWalker{b: data, bo: binary.LittleEndian}
	pos, ts, err := meta.fileMeta(132)
	if err != nil {
		return lay, false, fmt.Errorf("file meta information: %w", err)
	}
	if ts == "" {
		return lay, false, errors.New("file meta information has no TransferSyntaxUID (0002,0010)")
	}
	lay.transferSyntax = ts
	w := &dcmWalker{b: data, bo: binary.LittleEndian, lay: &lay, size: size}
	switch ts {
	case tsImplicitLE:
		w.implicit, lay.implicit = true, true
	case tsExplicitLE:
	case tsRLE:
		lay.codec = codecRLE
	case tsJPEGLS:
		lay.codec = codecJPEGLS
	case tsJPEGLossless, tsJPEGLosslessSV1:
		lay.codec = codecJPEGLossless
	case tsExplicitBE:
		w.bo, lay.bigEndian = binary.BigEndian, true
	case tsDeflatedLE:
		lay.deflated = true
		inflated, err := dcmInflate(data[pos:])
		if err != nil {
			return lay, false, err
		}
		w.b, w.size, pos = inflated, int64(len(inflated)), 0
	default:
		return lay, false, unsupportedSyntax(ts)
	}
	if _, err := w.elements(pos, len(w.b), 0, false); err != nil {
		return lay, false, err
	}
	return lay, w.atEnd, nil
}

// syntaxName is a transfer syntax UID with its name from PS3.6 Annex A.
func syntaxName(ts string) string {
	if ts == "" {
		return ""
	}
	if info, err := uid.Lookup(ts); err == nil {
		return dcmPrintable(ts) + " " + info.Name
	}
	return dcmPrintable(ts)
}

// unsupportedSyntax names a transfer syntax whose pixels are not decoded.
func unsupportedSyntax(ts string) error {
	name := "unknown transfer syntax"
	if info, err := uid.Lookup(ts); err == nil {
		name = info.Name
	}
	return fmt.Errorf("transfer syntax %s %s is not supported (only uncompressed, RLE Lossless, JPEG Lossless and JPEG-LS Lossless DICOM are read; "+
		"convert with a decompressing tool first)", dcmPrintable(ts), name)
}

// dcmInflate inflates a deflated data set in two passes: the first only
// counts (so a bomb is refused before anything is kept), the second fills a
// buffer of exactly the counted size.
func dcmInflate(b []byte) ([]byte, error) {
	r := flate.NewReader(bytes.NewReader(b))
	n, err := io.Copy(io.Discard, io.LimitReader(r, maxInflated+1))
	r.Close()
	if err != nil {
		return nil, fmt.Errorf("deflated data set: %w", err)
	}
	if n > maxInflated {
		return nil, fmt.Errorf("deflated data set inflates to more than the limit of %d MiB", maxInflated>>20)
	}
	r = flate.NewReader(bytes.NewReader(b))
	defer r.Close()
	out := make([]byte, n)
	if _, err := io.ReadFull(r, out); err != nil {
		return nil, fmt.Errorf("deflated data set: %w", err)
	}
	return out, nil
}

// dcmWalker steps over encoded elements without keeping their values.
type dcmWalker struct {
	b        []byte
	bo       binary.ByteOrder
	implicit bool
	lay      *dcmLayout // nil while walking the file meta group
	size     int64      // length of the whole data (b may be its first bytes)
	atEnd    bool       // the walk reached pixel data ending the file
}

// elemHead is one element's tag, VR and value length as the reader sees them.
type elemHead struct {
	tag       tag.Tag
	vr        string
	vl        uint32
	undefined bool
	start     int // offset of the element's tag
	value     int // offset of the value
}

func (w *dcmWalker) u16(pos int) uint16 { return w.bo.Uint16(w.b[pos:]) }
func (w *dcmWalker) u32(pos int) uint32 { return w.bo.Uint32(w.b[pos:]) }

// fileMeta walks group 0002 (always explicit VR little endian, PS3.10 7.1)
// and returns where the data set starts and the transfer syntax UID.
func (w *dcmWalker) fileMeta(pos int) (int, string, error) {
	end := len(w.b)
	h, err := w.head(pos, end)
	if err != nil {
		return 0, "", err
	}
	if h.tag == tag.FileMetaInformationGroupLength && h.vr == "UL" && h.vl == 4 && h.value+4 <= end {
		groupLen := int64(w.u32(h.value))
		pos = h.value + 4
		if groupLen > int64(end-pos) {
			return 0, "", fmt.Errorf("group length %d runs past the end of the file", groupLen)
		}
		end = pos + int(groupLen)
	}
	if pos+8 > len(w.b) || w.u16(pos) != 0x0002 {
		return 0, "", errors.New("group 0002 missing after \"DICM\"")
	}
	withLength := end < len(w.b)
	ts := ""
	for pos < end {
		if !withLength && (pos+2 > end || w.u16(pos) != 0x0002) {
			break
		}
		h, err := w.head(pos, end)
		if err != nil {
			return 0, "", err
		}
		if h.undefined || int64(h.vl) > int64(end-h.value) {
			return 0, "", fmt.Errorf("element %s length %d runs past the end of the group", dcmTagName(h.tag), h.vl)
		}
		if h.tag == tag.TransferSyntaxUID {
			if h.vr != "UI" {
				return 0, "", fmt.Errorf("TransferSyntaxUID (0002,0010) has VR %q, not UI", h.vr)
			}
			ts = strings.TrimRight(string(w.b[h.value:h.value+int(h.vl)]), "\x00 ")
		}
		pos = h.value + int(h.vl)
	}
	return pos, ts, nil
}

// head reads an element header at pos, as the reader would: items are
// always implicit; implicit VRs come from the dictionary.
func (w *dcmWalker) head(pos, end int) (elemHead, error) {
	h := elemHead{start: pos}
	if end-pos < 8 {
		return h, fmt.Errorf("element header at byte %d cut short by the end of its container", pos)
	}
	h.tag = tag.Tag{Group: w.u16(pos), Element: w.u16(pos + 2)}
	implicit := w.implicit || h.tag == tag.Item
	if implicit {
		h.vr = implicitVR(h.tag)
		h.vl = w.u32(pos + 4)
		h.value = pos + 8
	} else {
		h.vr = string(w.b[pos+4 : pos+6])
		if longLengthVR(h.vr) {
			if end-pos < 12 {
				return h, fmt.Errorf("element %s header cut short", dcmTagName(h.tag))
			}
			h.vl = w.u32(pos + 8)
			h.value = pos + 12
			if h.vl == tag.VLUndefinedLength && (h.vr == "UC" || h.vr == "UR" || h.vr == "UT") {
				return h, fmt.Errorf("element %s: VR %s may not have undefined length", dcmTagName(h.tag), h.vr)
			}
		} else {
			h.vl = uint32(w.u16(pos + 6))
			if h.vl == 0xffff {
				h.vl = tag.VLUndefinedLength
			}
			h.value = pos + 8
		}
	}
	h.undefined = h.vl == tag.VLUndefinedLength
	return h, nil
}

// implicitVR mirrors the reader's dictionary lookup for implicit VR.
func implicitVR(t tag.Tag) string {
	info, err := tag.Find(t)
	if err != nil {
		return "UN"
	}
	if t == tag.PixelData || t == tag.OverlayData {
		return "OW"
	}
	return info.VRs[0]
}

// longLengthVR lists the VRs the reader gives a 4-byte length (PS3.5 7.1.2).
func longLengthVR(vr string) bool {
	switch vr {
	case "NA", "OB", "OD", "OF", "OL", "OW", "SQ", "UN", "UC", "UR", "UT":
		return true
	}
	return false
}

// elements walks elements in [pos, end). In an undefined-length container
// it stops after the delimiter stop and returns the offset after it.
func (w *dcmWalker) elements(pos, end, depth int, inSequence bool) (int, error) {
	if depth > maxDICOMNesting {
		return 0, fmt.Errorf("sequences nested deeper than %d levels", maxDICOMNesting)
	}
	for pos < end {
		h, err := w.head(pos, end)
		if err != nil {
			return 0, err
		}
		if inSequence && h.tag != tag.Item {
			return 0, fmt.Errorf("sequence holds %s where an item belongs", dcmTagName(h.tag))
		}
		if pos, err = w.value(h, end, depth); err != nil {
			return 0, err
		}
	}
	return pos, nil
}

// untilDelimiter walks elements until the delimiter and returns the offset after it.
func (w *dcmWalker) untilDelimiter(pos, end, depth int, delim tag.Tag, inSequence bool) (int, error) {
	if depth > maxDICOMNesting {
		return 0, fmt.Errorf("sequences nested deeper than %d levels", maxDICOMNesting)
	}
	for {
		h, err := w.head(pos, end)
		if err != nil {
			return 0, fmt.Errorf("%w (looking for the %s delimiter)", err, dcmTagName(delim))
		}
		if h.tag == delim {
			return h.value, nil
		}
		if inSequence && h.tag != tag.Item {
			return 0, fmt.Errorf("sequence holds %s where an item belongs", dcmTagName(h.tag))
		}
		if pos, err = w.value(h, end, depth); err != nil {
			return 0, err
		}
	}
}

// value checks the value of element h and returns the offset after it.
func (w *dcmWalker) value(h elemHead, end, depth int) (int, error) {
	room := int64(end - h.value)
	if h.tag == tag.PixelData && depth == 0 && w.lay != nil && !h.undefined && int64(h.value)+int64(h.vl) == w.size {
		w.lay.hasPixelData, w.lay.pixelStart, w.lay.pixelLength = true, h.start, int64(h.vl)
		w.atEnd = true
		return end, nil
	}
	if !h.undefined && int64(h.vl) > room {
		if h.tag == tag.PixelData && depth == 0 && w.lay != nil && !w.lay.deflated {
			// Keep the header readable; loading the pixels reports this.
			w.lay.hasPixelData, w.lay.pixelStart, w.lay.pixelLength = true, h.start, int64(h.vl)
			w.lay.pixelErr = fmt.Errorf("pixel data (7FE0,0010) holds %d bytes, its length says %d: file is truncated", room, h.vl)
			return end, nil
		}
		return 0, fmt.Errorf("element %s length %d runs past the end of its container (%d bytes left): file is truncated or corrupt",
			dcmTagName(h.tag), h.vl, room)
	}
	next := h.value + int(h.vl)
	switch tag.GetVRKind(h.tag, h.vr) {
	case tag.VRSequence:
		return w.container(h, end, depth, true)
	case tag.VRItem:
		return w.container(h, end, depth, false)
	case tag.VRUnknown:
		if h.undefined {
			return w.container(h, end, depth, true)
		}
	case tag.VRPixelData:
		return w.pixelData(h, end, depth)
	case tag.VRBytes:
		if h.undefined {
			return w.rawItems(h.value, end, false)
		}
		if h.vr == "OW" && h.vl%2 != 0 {
			return 0, fmt.Errorf("element %s: VR OW with odd length %d", dcmTagName(h.tag), h.vl)
		}
	default:
		if h.undefined {
			return 0, fmt.Errorf("element %s (VR %q) has undefined length", dcmTagName(h.tag), h.vr)
		}
	}
	return next, nil
}

// container walks a sequence or item of defined or undefined length.
func (w *dcmWalker) container(h elemHead, end, depth int, sequence bool) (int, error) {
	delim := tag.ItemDelimitationItem
	if sequence {
		delim = tag.SequenceDelimitationItem
	}
	if h.undefined {
		return w.untilDelimiter(h.value, end, depth+1, delim, sequence)
	}
	next := h.value + int(h.vl)
	if _, err := w.elements(h.value, next, depth+1, sequence); err != nil {
		return 0, err
	}
	return next, nil
}

// pixelData records where the pixel data is and checks encapsulated items.
func (w *dcmWalker) pixelData(h elemHead, end, depth int) (int, error) {
	if depth == 0 && w.lay != nil {
		w.lay.hasPixelData = true
		w.lay.encapsulated = h.undefined
		w.lay.pixelStart = h.start
		if !h.undefined {
			w.lay.pixelLength = int64(h.vl)
		}
	}
	if !h.undefined {
		return h.value + int(h.vl), nil
	}
	return w.rawItems(h.value, end, depth == 0 && w.lay != nil)
}

// rawItems walks the items of an encapsulated value (PS3.5 A.4) up to the
// sequence delimiter.
// With pixels set it adds the items' lengths after the first (the basic
// offset table) to the layout's fragmentBytes.
func (w *dcmWalker) rawItems(pos, end int, pixels bool) (int, error) {
	for item := 0; ; item++ {
		if end-pos < 8 {
			return 0, errors.New("encapsulated data ends without its sequence delimiter (FFFE,E0DD)")
		}
		t := tag.Tag{Group: w.u16(pos), Element: w.u16(pos + 2)}
		vl := w.u32(pos + 4)
		pos += 8
		if t == tag.SequenceDelimitationItem {
			return pos, nil
		}
		if t != tag.Item || vl == tag.VLUndefinedLength {
			return 0, fmt.Errorf("encapsulated data holds %s of length %#x where a defined-length item belongs", dcmTagName(t), vl)
		}
		if int64(vl) > int64(end-pos) {
			return 0, fmt.Errorf("encapsulated item of %d bytes runs past the end of the file", vl)
		}
		if pixels && item > 0 {
			w.lay.fragmentBytes += int64(vl)
		}
		pos += int(vl)
	}
}

// dcmTagName formats a tag as "Keyword (gggg,eeee)".
func dcmTagName(t tag.Tag) string {
	s := fmt.Sprintf("(%04X,%04X)", t.Group, t.Element)
	if info, err := tag.Find(t); err == nil {
		s = info.Keyword + " " + s
	}
	return s
}

// dcmPrintable replaces control characters of header text, so that values
// from a file can neither break an error line nor a screen.
func dcmPrintable(s string) string {
	return strings.Map(func(r rune) rune {
		if r < 0x20 || r == 0x7f || (r >= 0x80 && r < 0xa0) {
			return ' '
		}
		return r
	}, s)
}

// bareDataSet explains a file without the PS3.10 preamble: when it starts
// like a data set (group 0002 or 0008, implicit or explicit VR little
// endian), it is one written without the file meta, which pydicom reads only
// with force=True; it is refused with that reason (and whether it holds
// pixel data at all). The error wraps errNotDICOM.
func bareDataSet(data []byte, size int64) error {
	if len(data) < 8 {
		return errNotDICOM
	}
	group := binary.LittleEndian.Uint16(data)
	if group != 0x0002 && group != 0x0008 {
		return errNotDICOM
	}
	pixels := "it holds pixel data (7FE0,0010), but"
	if !bytes.Contains(data, []byte{0xE0, 0x7F, 0x10, 0x00}) {
		if int64(len(data)) < size {
			pixels = "its pixel data was not looked for, and"
		} else {
			pixels = "it holds no pixel data (7FE0,0010), so no image, and"
		}
	}
	return bareDataSetError("a bare DICOM data set without the 128-byte preamble, \"DICM\" and file meta (DICOM PS3.10 7.1), as pydicom reads only with force=True; " +
		pixels + " such files are not read")
}

// bareDataSetError is a file refused by bareDataSet; it is errNotDICOM.
type bareDataSetError string

func (e bareDataSetError) Error() string { return string(e) }

func (e bareDataSetError) Unwrap() error { return errNotDICOM }
