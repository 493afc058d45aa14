package dicom

import (
	"encoding/binary"
	"errors"
	"fmt"
)

// JPEG-LS lossless decoding (ITU-T T.87 | ISO/IEC 14495-1, the DICOM
// transfer syntax 1.2.840.10008.1.2.4.80 of PS3.5 A.4.3, 8.2.3) for one
// grey-scale component: regular mode with the median edge predictor,
// context modelling and bias correction, run mode with run interruption
// samples, limited-length Golomb codes and the marker bit stuffing of the
// standard. Near-lossless coding (NEAR > 0), colour interleaving, mapping
// tables and point transforms are refused. The procedure follows T.87
// Annex A (decoding as the inverse of A.2–A.7, and Annex F); written from
// the standard's description as recalled, and checked on pydicom's test
// file MR_small_jpeg_ls_lossless.dcm against its uncompressed twin.

// jlsJ is the run-length order table J of T.87 A.7.1.1.
var jlsJ = [32]int{0, 0, 0, 0, 1, 1, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3, 4, 4, 5, 5, 6, 6, 7, 7, 8, 9, 10, 11, 12, 13, 14, 15}

// jlsParams are the coding parameters of one scan.
type jlsParams struct {
	width, height, bits int
	maxval, t1, t2, t3  int
	reset               int
	rng, qbpp, limit    int
}

// decodeJPEGLS decodes a JPEG-LS lossless image of one component into dst
// as little-endian samples of bpp bytes (1 or 2), rows × cols of them.
func decodeJPEGLS(data []byte, rows, cols, bpp int, dst []byte) error {
	p, scan, err := jlsHeaders(data)
	if err != nil {
		return err
	}
	if p.width != cols || p.height != rows {
		return fmt.Errorf("JPEG-LS frame is %d × %d, the DICOM header says Columns %d × Rows %d", p.width, p.height, cols, rows)
	}
	if p.bits > 8*bpp || p.maxval >= 1<<(8*bpp) {
		return fmt.Errorf("JPEG-LS samples of %d bits (MAXVAL %d) do not fit BitsAllocated %d", p.bits, p.maxval, 8*bpp)
	}
	d := &jlsDecoder{p: p, r: jlsBits{b: data, pos: scan}}
	d.init()
	return d.decode(dst, bpp)
}

// jlsHeaders reads the markers up to the start of scan: SOI, SOF55 (one
// component), an optional LSE preset-parameters segment, SOS (lossless, no
// interleave, no point transform). It returns the parameters and the offset
// of the entropy-coded data.
func jlsHeaders(b []byte) (jlsParams, int, error) {
	var p jlsParams
	if len(b) < 4 || b[0] != 0xFF || b[1] != 0xD8 {
		return p, 0, errors.New("JPEG-LS data does not start with the SOI marker FFD8")
	}
	pos, sof := 2, false
	for {
		m, seg, next, err := jpegSegment(b, pos, "JPEG-LS")
		if err != nil {
			return p, 0, err
		}
		pos = next
		switch m {
		case 0xF7: // SOF55: start of frame, JPEG-LS
			if len(seg) < 6 || seg[5] != 1 || len(seg) < 9 {
				return p, 0, errors.New("JPEG-LS frame header: only one component (grey-scale) is read")
			}
			p.bits = int(seg[0])
			p.height = int(binary.BigEndian.Uint16(seg[1:]))
			p.width = int(binary.BigEndian.Uint16(seg[3:]))
			if p.bits < 2 || p.bits > 16 || p.width < 1 || p.height < 1 {
				return p, 0, fmt.Errorf("JPEG-LS frame header: %d-bit samples, %d × %d, not a usable image", p.bits, p.width, p.height)
			}
			sof = true
		case 0xF8: // LSE
			if len(seg) < 1 || seg[0] != 1 {
				return p, 0, errors.New("JPEG-LS mapping tables or extended parameters are not read (only preset coding parameters)")
			}
			if len(seg) < 11 {
				return p, 0, errors.New("JPEG-LS preset parameters segment is too short")
			}
			p.maxval = int(binary.BigEndian.Uint16(seg[1:]))
			p.t1 = int(binary.BigEndian.Uint16(seg[3:]))
			p.t2 = int(binary.BigEndian.Uint16(seg[5:]))
			p.t3 = int(binary.BigEndian.Uint16(seg[7:]))
			p.reset = int(binary.BigEndian.Uint16(seg[9:]))
		case 0xDA: // SOS
			if !sof {
				return p, 0, errors.New("JPEG-LS start of scan before the frame header")
			}
			if len(seg) < 6 || seg[0] != 1 {
				return p, 0, errors.New("JPEG-LS scan header: only one component is read")
			}
			near, ilv, pt := seg[3], seg[4], seg[5]&0x0F
			if seg[2] != 0 {
				return p, 0, errors.New("JPEG-LS mapping tables are not read")
			}
			if near != 0 || ilv != 0 || pt != 0 {
				return p, 0, fmt.Errorf("JPEG-LS scan is not plain lossless (NEAR %d, interleave %d, point transform %d)", near, ilv, pt)
			}
			if err := p.complete(); err != nil {
				return p, 0, err
			}
			return p, pos, nil
		case 0xD8, 0xD9, 0x01:
			return p, 0, fmt.Errorf("JPEG-LS marker FF%02X where a header segment belongs", m)
		default:
			// APPn, COM and other segments carry nothing for decoding
		}
	}
}

// jpegSegment reads the marker segment at pos (after any 0xFF fill bytes)
// of a JPEG-family stream (T.81 B.1.1.4, T.87 C.1): its marker, its payload
// and the offset after it. what names the format in errors.
func jpegSegment(b []byte, pos int, what string) (byte, []byte, int, error) {
	for pos+1 < len(b) && b[pos] == 0xFF && b[pos+1] == 0xFF {
		pos++
	}
	if pos+4 > len(b) || b[pos] != 0xFF {
		return 0, nil, 0, fmt.Errorf("%s data ends or breaks before its start of scan", what)
	}
	m := b[pos+1]
	n := int(binary.BigEndian.Uint16(b[pos+2:]))
	if n < 2 || pos+2+n > len(b) {
		return 0, nil, 0, fmt.Errorf("%s marker FF%02X has a length of %d bytes that does not fit", what, m, n)
	}
	return m, b[pos+4 : pos+2+n], pos + 2 + n, nil
}

// complete fills the defaults of T.87 C.2.4.1.1 for NEAR = 0 and the derived
// values of A.2.1.
func (p *jlsParams) complete() error {
	full := 1<<p.bits - 1
	if p.maxval == 0 {
		p.maxval = full
	}
	if p.maxval < 1 || p.maxval > 65535 {
		return fmt.Errorf("JPEG-LS MAXVAL %d is out of range", p.maxval)
	}
	clamp := func(x, lo, hi int) int {
		if x > hi || x < lo {
			return lo
		}
		return x
	}
	var d1, d2, d3 int
	if p.maxval >= 128 {
		f := (min(p.maxval, 4095) + 128) >> 8
		d1, d2, d3 = clamp(f*(3-2)+2, 1, p.maxval), 0, 0
		d2 = clamp(f*(7-3)+3, d1, p.maxval)
		d3 = clamp(f*(21-4)+4, d2, p.maxval)
	} else {
		f := 256 / (p.maxval + 1)
		d1 = clamp(max(2, 3/f), 1, p.maxval)
		d2 = clamp(max(3, 7/f), d1, p.maxval)
		d3 = clamp(max(4, 21/f), d2, p.maxval)
	}
	if p.t1 == 0 {
		p.t1 = d1
	}
	if p.t2 == 0 {
		p.t2 = d2
	}
	if p.t3 == 0 {
		p.t3 = d3
	}
	if p.reset == 0 {
		p.reset = 64
	}
	if !(1 <= p.t1 && p.t1 <= p.t2 && p.t2 <= p.t3 && p.t3 <= p.maxval) || p.reset < 3 {
		return fmt.Errorf("JPEG-LS thresholds T1 %d, T2 %d, T3 %d or RESET %d are not valid for MAXVAL %d", p.t1, p.t2, p.t3, p.reset, p.maxval)
	}
	p.rng = p.maxval + 1
	p.qbpp = bitsFor(p.rng)
	bpp := max(2, bitsFor(p.maxval+1))
	p.limit = 2 * (bpp + max(8, bpp))
	return nil
}

// bitsFor is ⌈log2 n⌉.
func bitsFor(n int) int {
	b := 0
	for 1<<b < n {
		b++
	}
	return b
}

// jlsBits reads the entropy-coded segment MSB first; after a 0xFF byte the
// next byte carries 7 bits (T.87 A.1: bit stuffing), and 0xFF followed by a
// byte with its top bit set is a marker, the end of the data.
type jlsBits struct {
	b      []byte
	pos    int
	acc    uint64
	n      uint // bits in acc
	prevFF bool
	ended  bool
}

func (r *jlsBits) fill() {
	for r.n <= 56 {
		if r.ended || r.pos >= len(r.b) {
			r.ended = true
			return
		}
		c := r.b[r.pos]
		if r.prevFF {
			if c&0x80 != 0 { // a marker: the coded data is over
				r.ended = true
				return
			}
			r.acc = r.acc<<7 | uint64(c)
			r.n += 7
		} else {
			r.acc = r.acc<<8 | uint64(c)
			r.n += 8
		}
		r.prevFF = c == 0xFF
		r.pos++
	}
}

var errJLSShort = errors.New("JPEG-LS coded data ends before the image is complete")

func (r *jlsBits) bit() (int, error) {
	if r.n == 0 {
		r.fill()
		if r.n == 0 {
			return 0, errJLSShort
		}
	}
	r.n--
	return int(r.acc>>r.n) & 1, nil
}

func (r *jlsBits) bits(k int) (int, error) {
	return takeBits(&r.acc, &r.n, k, r.fill, errJLSShort)
}

// takeBits takes the next k bits (k ≤ 32) of a bit accumulator holding n
// bits, refilling it with fill when short; short is the error when the
// data ends first.
func takeBits(acc *uint64, n *uint, k int, fill func(), short error) (int, error) {
	if k == 0 {
		return 0, nil
	}
	if uint(k) > *n {
		fill()
		if uint(k) > *n {
			return 0, short
		}
	}
	*n -= uint(k)
	return int(*acc>>*n) & (1<<k - 1), nil
}

// golomb decodes a limited-length Golomb code (T.87 A.5.3).
func (r *jlsBits) golomb(k, limit, qbpp int) (int, error) {
	q := 0
	for {
		b, err := r.bit()
		if err != nil {
			return 0, err
		}
		if b == 1 {
			break
		}
		q++
		if q > limit {
			return 0, errors.New("JPEG-LS code longer than its limit")
		}
	}
	if q >= limit-qbpp-1 {
		v, err := r.bits(qbpp)
		return v + 1, err
	}
	v, err := r.bits(k)
	return q<<k | v, err
}

// jlsContext holds the adaptive state of one context (T.87 A.2.2).
type jlsContext struct{ a, b, c, n, nn int }

type jlsDecoder struct {
	p        jlsParams
	r        jlsBits
	ctx      [365]jlsContext
	ri       [2]jlsContext // run interruption contexts 365 (RItype 0) and 366 (1)
	runIndex int
}

func (d *jlsDecoder) init() {
	a := max(2, (d.p.rng+32)>>6)
	for i := range d.ctx {
		d.ctx[i] = jlsContext{a: a, n: 1}
	}
	d.ri = [2]jlsContext{{a: a, n: 1}, {a: a, n: 1}}
}

// quantise maps a local gradient to one of the nine regions of T.87
// A.3.3 (NEAR = 0).
func (p *jlsParams) quantise(g int) int {
	switch {
	case g <= -p.t3:
		return -4
	case g <= -p.t2:
		return -3
	case g <= -p.t1:
		return -2
	case g < 0:
		return -1
	case g == 0:
		return 0
	case g < p.t1:
		return 1
	case g < p.t2:
		return 2
	case g < p.t3:
		return 3
	}
	return 4
}

// decode reconstructs every sample, line by line, with the edge rules of
// T.87 A.2.1: above the first line all samples are 0; the sample left of
// the first column is the one above it; the one above-left of the first
// column is the previous line's left neighbour; the one above-right of the
// last column is the one above it.
func (d *jlsDecoder) decode(dst []byte, bpp int) error {
	w := d.p.width
	prev := make([]int, w+2) // index 1..w hold samples; 0 and w+1 the edges
	cur := make([]int, w+2)
	for y := 0; y < d.p.height; y++ {
		prev[w+1] = prev[w]
		cur[0] = prev[1]
		if err := d.line(prev, cur); err != nil {
			return fmt.Errorf("line %d: %w", y+1, err)
		}
		row := dst[y*w*bpp:]
		for x := 0; x < w; x++ {
			v := cur[x+1]
			if bpp == 1 {
				row[x] = byte(v)
			} else {
				binary.LittleEndian.PutUint16(row[2*x:], uint16(v))
			}
		}
		prev, cur = cur, prev
	}
	return nil
}

func (d *jlsDecoder) line(prev, cur []int) error {
	w := d.p.width
	for x := 1; x <= w; {
		ra, rb, rc, rd := cur[x-1], prev[x], prev[x-1], prev[x+1]
		q1, q2, q3 := d.p.quantise(rd-rb), d.p.quantise(rb-rc), d.p.quantise(rc-ra)
		if q1 == 0 && q2 == 0 && q3 == 0 {
			n, err := d.run(prev, cur, x)
			if err != nil {
				return err
			}
			x += n
			continue
		}
		v, err := d.regular(q1, q2, q3, ra, rb, rc)
		if err != nil {
			return err
		}
		cur[x] = v
		x++
	}
	return nil
}

// regular decodes one sample in regular mode (T.87 A.3–A.6).
func (d *jlsDecoder) regular(q1, q2, q3, ra, rb, rc int) (int, error) {
	qs := 81*q1 + 9*q2 + q3
	sign := 1
	if qs < 0 {
		sign, qs = -1, -qs
	}
	c := &d.ctx[qs]
	px := ra + rb - rc // median edge predictor (A.4.1)
	switch {
	case rc >= max(ra, rb):
		px = min(ra, rb)
	case rc <= min(ra, rb):
		px = max(ra, rb)
	}
	px = min(max(px+sign*c.c, 0), d.p.maxval)
	k := 0
	for c.n<<k < c.a {
		k++
	}
	m, err := d.r.golomb(k, d.p.limit, d.p.qbpp)
	if err != nil {
		return 0, err
	}
	e := m >> 1
	if m&1 != 0 {
		e = -(m + 1) >> 1
	}
	if k == 0 && 2*c.b <= -c.n {
		e = -(e + 1)
	}
	c.update(e, d.p.reset)
	return d.wrap(px + sign*e), nil
}

// update is the regular-mode context update and bias correction of T.87
// A.6 after the (sign-corrected) prediction error e.
func (c *jlsContext) update(e, reset int) {
	c.b += e
	c.a += abs(e)
	if c.n == reset {
		c.a >>= 1
		c.b >>= 1
		c.n >>= 1
	}
	c.n++
	if c.b <= -c.n {
		c.b += c.n
		if c.c > -128 {
			c.c--
		}
		if c.b <= -c.n {
			c.b = -c.n + 1
		}
	} else if c.b > 0 {
		c.b -= c.n
		if c.c < 127 {
			c.c++
		}
		if c.b > 0 {
			c.b = 0
		}
	}
}

// updateRI is the run-interruption context update of T.87 A.7.2.2 after
// the error e, coded as m, for interruption type t.
func (c *jlsContext) updateRI(e, m, t, reset int) {
	if e < 0 {
		c.nn++
	}
	c.a += (m + 1 - t) >> 1
	if c.n == reset {
		c.a >>= 1
		c.n >>= 1
		c.nn >>= 1
	}
	c.n++
}

// wrap reduces a reconstructed value modulo RANGE into [0, MAXVAL].
func (d *jlsDecoder) wrap(v int) int {
	if v < 0 {
		v += d.p.rng
	} else if v > d.p.maxval {
		v -= d.p.rng
	}
	return min(max(v, 0), d.p.maxval)
}

// run decodes run mode from column x (T.87 A.7): runs of the left
// neighbour's value, then, unless the run reaches the end of the line, one
// run interruption sample. It returns the number of samples decoded.
func (d *jlsDecoder) run(prev, cur []int, x int) (int, error) {
	w := d.p.width
	ra := cur[x-1]
	left := w - x + 1
	n := 0
	for n < left {
		b, err := d.r.bit()
		if err != nil {
			return 0, err
		}
		if b == 0 {
			extra, err := d.r.bits(jlsJ[d.runIndex])
			if err != nil {
				return 0, err
			}
			if n+extra >= left {
				return 0, errors.New("a run passes the end of the line")
			}
			n += extra
			for i := 0; i < n; i++ {
				cur[x+i] = ra
			}
			v, err := d.interruption(ra, prev[x+n])
			if err != nil {
				return 0, err
			}
			cur[x+n] = v
			if d.runIndex > 0 {
				d.runIndex--
			}
			return n + 1, nil
		}
		seg := 1 << jlsJ[d.runIndex]
		step := min(seg, left-n)
		n += step
		if step == seg && d.runIndex < 31 {
			d.runIndex++
		}
	}
	for i := 0; i < n; i++ {
		cur[x+i] = ra
	}
	return n, nil
}

// interruption decodes the sample that ends a run (T.87 A.7.2).
func (d *jlsDecoder) interruption(ra, rb int) (int, error) {
	t := 0
	if ra == rb {
		t = 1
	}
	c := &d.ri[t]
	temp := c.a
	if t == 1 {
		temp += c.n >> 1
	}
	k := 0
	for c.n<<k < temp {
		k++
	}
	m, err := d.r.golomb(k, d.p.limit-jlsJ[d.runIndex]-1, d.p.qbpp)
	if err != nil {
		return 0, err
	}
	tmp := m + t
	mp := tmp & 1
	e := (tmp + mp) >> 1
	if (k != 0 || 2*c.nn >= c.n) == (mp == 1) {
		e = -e
	}
	c.updateRI(e, m, t, d.p.reset)
	px := rb
	if t == 1 {
		px = ra
	} else if ra > rb {
		e = -e
	}
	return d.wrap(px + e), nil
}

func abs(x int) int {
	if x < 0 {
		return -x
	}
	return x
}

// checkJPEGLSLength refuses an image the coded data could not hold, before
// anything is allocated: T.87 codes every line with at least one bit (a
// regular-mode sample ends its code with a 1 bit; a run ends at the latest
// at the end of its line and is signalled per line), so the lines of all
// frames cannot outnumber the bits of the fragments.
func (f *dcmFile) checkJPEGLSLength() error {
	if f.bitsAllocated != 8 && f.bitsAllocated != 16 {
		return fmt.Errorf("JPEG-LS Lossless with BitsAllocated %d is not read (8 or 16)", f.bitsAllocated)
	}
	if lines := int64(f.rows) * int64(f.frames); lines > 8*f.layout.fragmentBytes {
		return fmt.Errorf("JPEG-LS Lossless fragments hold %d bytes, too few for %d lines of Rows %d × %d frame(s)",
			f.layout.fragmentBytes, lines, f.rows, f.frames)
	}
	return nil
}
