package dicom

import (
	"encoding/binary"
	"errors"
	"fmt"
)

// Lossless JPEG decoding (ITU-T T.81 | ISO/IEC 10918-1, Annex H: the
// lossless process with Huffman coding, SOF3), the DICOM transfer syntaxes
// JPEG Lossless Process 14 (1.2.840.10008.1.2.4.57) and its first-order
// prediction form SV1 (1.2.840.10008.1.2.4.70), PS3.5 A.4.1, 8.2.1. Each
// sample is its prediction from decoded neighbours (H.1.2.1: predictors 1
// to 7) plus a Huffman-coded difference (H.1.2.2, magnitude categories as
// in F.1.2.1), modulo 2^16; the first line predicts from the left, the
// first column from above, the first sample (and each first one after a
// restart) from 2^(P−Pt−1). Components of a scan are interleaved one
// sample each (sampling factors 1). Written from the standard's
// description as recalled; checked on pydicom's RGB test file against the
// same image stored uncompressed with RLE, and by round trips through a
// test-only encoder.

// ljFrame is what the markers of a lossless JPEG image say.
type ljFrame struct {
	bits, height, width int
	comps               []ljComp
	predictor, pt       int
	restart             int // samples per component between restarts (0: none)
	tables              [4]*ljHuffman
}

type ljComp struct {
	id    byte
	table int
}

// ljHuffman is a decoding table built as in T.81 F.2.2.3 (Figure F.16):
// for each code length the largest code and the index of its first value.
type ljHuffman struct {
	maxcode [18]int
	valptr  [17]int
	mincode [17]int
	values  []byte
	// lut decodes codes of up to ljLUTBits bits in one step: indexed by the
	// next ljLUTBits bits, it holds length<<8 | value, or 0 for longer codes.
	lut [1 << ljLUTBits]uint16
}

const ljLUTBits = 9

func newLJHuffman(counts [16]int, values []byte) (*ljHuffman, error) {
	h := &ljHuffman{values: values}
	code, k := 0, 0
	for l := 1; l <= 16; l++ {
		n := counts[l-1]
		h.valptr[l] = k
		h.mincode[l] = code
		code += n
		k += n
		if n > 0 {
			h.maxcode[l] = code - 1
		} else {
			h.maxcode[l] = -1
		}
		if code > 1<<l {
			return nil, errors.New("Huffman table has more codes than its lengths allow")
		}
		code <<= 1
	}
	h.maxcode[17] = 1 << 30
	if k != len(values) {
		return nil, errors.New("Huffman table counts do not match its values")
	}
	for l := 1; l <= ljLUTBits; l++ {
		for c := h.mincode[l]; c <= h.maxcode[l]; c++ {
			v := uint16(l)<<8 | uint16(values[h.valptr[l]+c-h.mincode[l]])
			lo := c << (ljLUTBits - l)
			for j := 0; j < 1<<(ljLUTBits-l); j++ {
				h.lut[lo+j] = v
			}
		}
	}
	return h, nil
}

// decodeLosslessJPEG decodes a one-component lossless JPEG image of rows ×
// cols into dst as little-endian samples of bpp bytes.
func decodeLosslessJPEG(data []byte, rows, cols, bpp int, dst []byte) error {
	fr, scan, err := ljHeaders(data)
	if err != nil {
		return err
	}
	if len(fr.comps) != 1 {
		return fmt.Errorf("lossless JPEG with %d components: only grey-scale (one) is read", len(fr.comps))
	}
	if fr.width != cols || fr.height != rows {
		return fmt.Errorf("lossless JPEG frame is %d × %d, the DICOM header says Columns %d × Rows %d", fr.width, fr.height, cols, rows)
	}
	if fr.bits > 8*bpp {
		return fmt.Errorf("lossless JPEG samples of %d bits do not fit BitsAllocated %d", fr.bits, 8*bpp)
	}
	planes, err := fr.decode(data, scan)
	if err != nil {
		return err
	}
	for i, v := range planes[0] {
		if bpp == 1 {
			dst[i] = byte(v)
		} else {
			binary.LittleEndian.PutUint16(dst[2*i:], uint16(v))
		}
	}
	return nil
}

// ljHeaders reads SOI, SOF3, DHT, DRI and SOS (other segments are
// skipped) and returns the frame and the offset of the coded data.
func ljHeaders(b []byte) (*ljFrame, int, error) {
	if len(b) < 4 || b[0] != 0xFF || b[1] != 0xD8 {
		return nil, 0, errors.New("lossless JPEG data does not start with the SOI marker FFD8")
	}
	fr := &ljFrame{}
	pos, sof := 2, false
	for {
		m, seg, next, err := jpegSegment(b, pos, "lossless JPEG")
		if err != nil {
			return nil, 0, err
		}
		pos = next
		switch {
		case m == 0xC3:
			if err := fr.readSOF(seg); err != nil {
				return nil, 0, err
			}
			sof = true
		case m >= 0xC0 && m <= 0xCF && m != 0xC4 && m != 0xC8 && m != 0xCC:
			return nil, 0, fmt.Errorf("JPEG frame type FF%02X is not the lossless Huffman process (SOF3)", m)
		case m == 0xC4:
			if err := fr.readDHT(seg); err != nil {
				return nil, 0, err
			}
		case m == 0xDD:
			if len(seg) < 2 {
				return nil, 0, errors.New("lossless JPEG restart interval segment is too short")
			}
			fr.restart = int(binary.BigEndian.Uint16(seg))
		case m == 0xDA:
			if !sof {
				return nil, 0, errors.New("lossless JPEG start of scan before the frame header")
			}
			if err := fr.readSOS(seg); err != nil {
				return nil, 0, err
			}
			return fr, pos, nil
		case m == 0xD8 || m == 0xD9 || (m >= 0xD0 && m <= 0xD7):
			return nil, 0, fmt.Errorf("lossless JPEG marker FF%02X where a header segment belongs", m)
		}
	}
}

func (fr *ljFrame) readSOF(seg []byte) error {
	if len(seg) < 6 {
		return errors.New("lossless JPEG frame header is too short")
	}
	fr.bits = int(seg[0])
	fr.height = int(binary.BigEndian.Uint16(seg[1:]))
	fr.width = int(binary.BigEndian.Uint16(seg[3:]))
	nc := int(seg[5])
	if fr.bits < 2 || fr.bits > 16 || fr.width < 1 || fr.height < 1 || nc < 1 || nc > 4 || len(seg) < 6+3*nc {
		return fmt.Errorf("lossless JPEG frame header: %d-bit samples, %d × %d, %d components: not a usable image", fr.bits, fr.width, fr.height, nc)
	}
	fr.comps = make([]ljComp, nc)
	for i := range fr.comps {
		c := seg[6+3*i:]
		if c[1] != 0x11 {
			return errors.New("lossless JPEG with subsampled components is not read")
		}
		fr.comps[i].id = c[0]
	}
	return nil
}

func (fr *ljFrame) readDHT(seg []byte) error {
	for len(seg) > 0 {
		if len(seg) < 17 {
			return errors.New("lossless JPEG Huffman table segment is too short")
		}
		class, id := seg[0]>>4, int(seg[0]&0x0F)
		if class != 0 || id > 3 {
			return fmt.Errorf("lossless JPEG Huffman table of class %d, id %d (only DC tables 0–3 are used)", class, id)
		}
		var counts [16]int
		total := 0
		for i := range counts {
			counts[i] = int(seg[1+i])
			total += counts[i]
		}
		if len(seg) < 17+total {
			return errors.New("lossless JPEG Huffman table values run past the segment")
		}
		h, err := newLJHuffman(counts, append([]byte(nil), seg[17:17+total]...))
		if err != nil {
			return fmt.Errorf("lossless JPEG: %w", err)
		}
		fr.tables[id] = h
		seg = seg[17+total:]
	}
	return nil
}

func (fr *ljFrame) readSOS(seg []byte) error {
	if len(seg) < 1 {
		return errors.New("lossless JPEG scan header is too short")
	}
	ns := int(seg[0])
	if ns != len(fr.comps) || len(seg) < 1+2*ns+3 {
		return fmt.Errorf("lossless JPEG scan of %d component(s) in a frame of %d: only single-scan images are read", ns, len(fr.comps))
	}
	for i := 0; i < ns; i++ {
		id, tab := seg[1+2*i], int(seg[2+2*i]>>4)
		if id != fr.comps[i].id || tab >= len(fr.tables) || fr.tables[tab] == nil {
			return errors.New("lossless JPEG scan names a component or Huffman table the frame does not define")
		}
		fr.comps[i].table = tab
	}
	p := seg[1+2*ns:]
	fr.predictor, fr.pt = int(p[0]), int(p[2]&0x0F)
	if fr.predictor < 1 || fr.predictor > 7 || fr.pt >= fr.bits {
		return fmt.Errorf("lossless JPEG predictor %d or point transform %d is not valid", fr.predictor, fr.pt)
	}
	return nil
}

// ljBits reads Huffman-coded data MSB first, dropping the 0x00 stuffed
// after each 0xFF (T.81 F.1.2.3); a marker ends the data (restart markers
// are handled by the caller).
type ljBits struct {
	b     []byte
	pos   int
	acc   uint64
	n     uint
	atMrk bool // stopped in front of a marker
}

func (r *ljBits) fill() {
	for r.n <= 56 && !r.atMrk && r.pos < len(r.b) {
		c := r.b[r.pos]
		if c == 0xFF {
			if r.pos+1 >= len(r.b) {
				r.atMrk = true
				return
			}
			if r.b[r.pos+1] != 0x00 {
				r.atMrk = true
				return
			}
			r.pos += 2
		} else {
			r.pos++
		}
		r.acc = r.acc<<8 | uint64(c)
		r.n += 8
	}
}

var errLJShort = errors.New("lossless JPEG coded data ends before the image is complete")

func (r *ljBits) bits(k int) (int, error) {
	return takeBits(&r.acc, &r.n, k, r.fill, errLJShort)
}

// restart skips to after the next RSTn marker, dropping the padding bits.
func (r *ljBits) restart() error {
	r.acc, r.n = 0, 0
	if r.pos+1 < len(r.b) && r.b[r.pos] == 0xFF && r.b[r.pos+1] >= 0xD0 && r.b[r.pos+1] <= 0xD7 {
		r.pos += 2
		r.atMrk = false
		return nil
	}
	return errors.New("lossless JPEG restart marker missing")
}

// decodeSymbol decodes one Huffman symbol (T.81 F.2.2.3, DECODE).
func (r *ljBits) decodeSymbol(h *ljHuffman) (int, error) {
	if r.n < ljLUTBits {
		r.fill()
	}
	if r.n >= ljLUTBits {
		if e := h.lut[(r.acc>>(r.n-ljLUTBits))&(1<<ljLUTBits-1)]; e != 0 {
			r.n -= uint(e >> 8)
			return int(e & 0xFF), nil
		}
	}
	code := 0
	for l := 1; l <= 16; l++ {
		b, err := r.bits(1)
		if err != nil {
			return 0, err
		}
		code = code<<1 | b
		if h.maxcode[l] >= 0 && code <= h.maxcode[l] && code >= h.mincode[l] {
			i := h.valptr[l] + code - h.mincode[l]
			if i >= len(h.values) {
				break
			}
			return int(h.values[i]), nil
		}
	}
	return 0, errors.New("lossless JPEG data holds a code its Huffman table does not define")
}

// difference decodes one sample difference: its category s (0–16), then s
// bits, negative when the first bit is 0 (T.81 F.2.2.1 EXTEND; H.1.2.2:
// category 16 is 32768 with no bits).
func (r *ljBits) difference(h *ljHuffman) (int, error) {
	s, err := r.decodeSymbol(h)
	if err != nil {
		return 0, err
	}
	switch {
	case s == 0:
		return 0, nil
	case s == 16:
		return 32768, nil
	case s > 16:
		return 0, fmt.Errorf("lossless JPEG difference category %d is out of range", s)
	}
	v, err := r.bits(s)
	if err != nil {
		return 0, err
	}
	if v < 1<<(s-1) {
		v -= 1<<s - 1
	}
	return v, nil
}

// decode returns one plane of samples per component (row by row), after
// the point transform is undone. Restart intervals must span whole lines
// (the usual encoders' choice), so that "the first line after a restart" of
// T.81 H.1.2.1 is a line.
func (fr *ljFrame) decode(data []byte, scan int) ([][]int, error) {
	w, h, nc := fr.width, fr.height, len(fr.comps)
	if fr.restart > 0 && fr.restart%w != 0 {
		return nil, fmt.Errorf("lossless JPEG restart interval of %d samples does not span whole lines of %d", fr.restart, w)
	}
	planes := make([][]int, nc)
	for c := range planes {
		planes[c] = make([]int, w*h)
	}
	r := &ljBits{b: data, pos: scan}
	first := 1 << (fr.bits - fr.pt - 1)
	top := 0 // first line of the current restart interval
	for y := 0; y < h; y++ {
		if fr.restart > 0 && y > 0 && (y*w)%fr.restart == 0 {
			if err := r.restart(); err != nil {
				return nil, err
			}
			top = y
		}
		for x := 0; x < w; x++ {
			for c, comp := range fr.comps {
				d, err := r.difference(fr.tables[comp.table])
				if err != nil {
					return nil, fmt.Errorf("line %d: %w", y+1, err)
				}
				pl := planes[c]
				pl[y*w+x] = (fr.predict(pl, x, y, top, first) + d) & 0xFFFF
			}
		}
	}
	if fr.pt > 0 {
		for _, pl := range planes {
			for i := range pl {
				pl[i] <<= fr.pt
			}
		}
	}
	return planes, nil
}

// predict gives the prediction of sample (x, y) of plane pl (T.81 H.1.2.1
// and Table H.1): the first sample of a restart interval (or of the scan)
// is 2^(P−Pt−1); the rest of its first line uses the left neighbour, the
// first column the one above, the others the scan's predictor.
func (fr *ljFrame) predict(pl []int, x, y, top, first int) int {
	w := fr.width
	switch {
	case y == top && x == 0:
		return first
	case y == top:
		return pl[y*w+x-1]
	case x == 0:
		return pl[(y-1)*w]
	}
	ra, rb, rc := pl[y*w+x-1], pl[(y-1)*w+x], pl[(y-1)*w+x-1]
	switch fr.predictor {
	case 1:
		return ra
	case 2:
		return rb
	case 3:
		return rc
	case 4:
		return ra + rb - rc
	case 5:
		return ra + (rb-rc)>>1
	case 6:
		return rb + (ra-rc)>>1
	}
	return (ra + rb) >> 1
}

// checkLosslessJPEGLength refuses an image the coded data could not hold,
// before anything is allocated: every sample takes a Huffman code of at
// least one bit (T.81 F.1.2).
func (f *dcmFile) checkLosslessJPEGLength() error {
	if f.bitsAllocated != 8 && f.bitsAllocated != 16 {
		return fmt.Errorf("JPEG Lossless with BitsAllocated %d is not read (8 or 16)", f.bitsAllocated)
	}
	if n := int64(f.rows) * int64(f.cols) * int64(f.frames); n > 8*f.layout.fragmentBytes {
		return fmt.Errorf("JPEG Lossless fragments hold %d bytes, too few for %d samples of Rows %d × Columns %d × %d frame(s)",
			f.layout.fragmentBytes, n, f.rows, f.cols, f.frames)
	}
	return nil
}

// decodeJPEGFrames decodes JPEG-family frames (JPEG Lossless, JPEG-LS)
// with decode into the native little-endian layout. A single frame may be
// split over several fragments (PS3.5 A.4); with several frames each must
// be one fragment, since the offset table that would map fragments to
// frames is not kept.
func (f *dcmFile) decodeJPEGFrames(frags [][]byte, codec string, decode func(data []byte, rows, cols, bpp int, dst []byte) error) ([]byte, error) {
	if f.frames == 1 && len(frags) > 1 {
		var all []byte
		for _, fr := range frags {
			all = append(all, fr...)
		}
		frags = [][]byte{all}
	}
	if len(frags) != f.frames {
		return nil, fmt.Errorf("%s pixel data holds %d fragment(s) for %d frame(s)", codec, len(frags), f.frames)
	}
	return f.decodeFrames(frags, codec, func(frag []byte, bpp int, dst []byte) error {
		return decode(frag, f.rows, f.cols, bpp, dst)
	})
}
