package dicom

import (
	"encoding/binary"
	"math/rand/v2"
	"strings"
	"testing"
)

// jlsEncode is a test-only JPEG-LS lossless encoder for one component,
// written from the encoding procedure of ITU-T T.87 Annex A (A.2–A.7:
// context determination, run mode with run interruption, regular mode,
// error mapping, limited-length Golomb codes, context update and bias
// correction), kept apart from the decoder's code so that a round trip
// checks one against the other; only the context updates (A.6, A.7.2.2),
// and the gradient quantiser (A.3.3), the same on both sides, are shared. With preset it writes an LSE segment.
func jlsEncode(img []int, w, h, bits int, preset bool) []byte {
	p := jlsParams{width: w, height: h, bits: bits}
	if err := p.complete(); err != nil {
		panic(err)
	}
	e := &jlsEnc{p: p}
	a := max(2, (p.rng+32)>>6)
	for i := range e.ctx {
		e.ctx[i] = jlsContext{a: a, n: 1}
	}
	e.ri = [2]jlsContext{{a: a, n: 1}, {a: a, n: 1}}
	prev := make([]int, w+2)
	cur := make([]int, w+2)
	for y := 0; y < h; y++ {
		prev[w+1] = prev[w]
		cur[0] = prev[1]
		copy(cur[1:w+1], img[y*w:(y+1)*w])
		for x := 1; x <= w; {
			ra, rb, rc, rd := cur[x-1], prev[x], prev[x-1], prev[x+1]
			q1, q2, q3 := e.p.quantise(rd-rb), e.p.quantise(rb-rc), e.p.quantise(rc-ra)
			if q1 == 0 && q2 == 0 && q3 == 0 {
				x += e.run(prev, cur, x)
				continue
			}
			e.regular(q1, q2, q3, ra, rb, rc, cur[x])
			x++
		}
		prev, cur = cur, prev
	}
	e.flush()
	out := []byte{0xFF, 0xD8, 0xFF, 0xF7, 0, 11, byte(bits)}
	out = binary.BigEndian.AppendUint16(out, uint16(h))
	out = binary.BigEndian.AppendUint16(out, uint16(w))
	out = append(out, 1, 1, 0x11, 0)
	if preset {
		out = append(out, 0xFF, 0xF8, 0, 13, 1)
		for _, v := range []int{p.maxval, p.t1, p.t2, p.t3, p.reset} {
			out = binary.BigEndian.AppendUint16(out, uint16(v))
		}
	}
	out = append(out, 0xFF, 0xDA, 0, 8, 1, 1, 0, 0, 0, 0)
	out = append(out, e.out...)
	return append(out, 0xFF, 0xD9)
}

type jlsEnc struct {
	p        jlsParams
	ctx      [365]jlsContext
	ri       [2]jlsContext
	runIndex int
	out      []byte
	acc      uint32
	nacc     uint // bits waiting in acc
	room     uint // bits the next byte takes: 8, or 7 after 0xFF
}

// put appends the n low bits of v, MSB first, stuffing a 0 bit after each
// 0xFF byte (T.87 A.1).
func (e *jlsEnc) put(v uint32, n uint) {
	for i := int(n) - 1; i >= 0; i-- {
		if e.room == 0 {
			e.room = 8
		}
		e.acc = e.acc<<1 | (v>>uint(i))&1
		e.nacc++
		if e.nacc == e.room {
			b := byte(e.acc)
			e.out = append(e.out, b)
			e.acc, e.nacc = 0, 0
			e.room = 8
			if b == 0xFF {
				e.room = 7
			}
		}
	}
}

func (e *jlsEnc) flush() {
	for e.nacc != 0 {
		e.put(0, 1)
	}
}

// golomb writes the limited-length Golomb code of m (T.87 A.5.3).
func (e *jlsEnc) golomb(m, k, limit int) {
	if hi := m >> k; hi < limit-e.p.qbpp-1 {
		e.put(0, uint(hi))
		e.put(1, 1)
		e.put(uint32(m)&(1<<k-1), uint(k))
		return
	}
	e.put(0, uint(limit-e.p.qbpp-1))
	e.put(1, 1)
	e.put(uint32(m-1), uint(e.p.qbpp))
}

// modRange reduces a prediction error into [−RANGE/2, RANGE/2) (A.4.5).
func (e *jlsEnc) modRange(v int) int {
	if v < 0 {
		v += e.p.rng
	}
	if v >= (e.p.rng+1)/2 {
		v -= e.p.rng
	}
	return v
}

func (e *jlsEnc) regular(q1, q2, q3, ra, rb, rc, ix int) {
	qs := 81*q1 + 9*q2 + q3
	sign := 1
	if qs < 0 {
		sign, qs = -1, -qs
	}
	c := &e.ctx[qs]
	var px int
	if rc >= max(ra, rb) {
		px = min(ra, rb)
	} else if rc <= min(ra, rb) {
		px = max(ra, rb)
	} else {
		px = ra + rb - rc
	}
	px += sign * c.c
	px = min(max(px, 0), e.p.maxval)
	errv := e.modRange(sign * (ix - px))
	k := 0
	for c.n<<k < c.a {
		k++
	}
	var m int
	if k == 0 && 2*c.b <= -c.n {
		if errv >= 0 {
			m = 2*errv + 1
		} else {
			m = -2 * (errv + 1)
		}
	} else if errv >= 0 {
		m = 2 * errv
	} else {
		m = -2*errv - 1
	}
	e.golomb(m, k, e.p.limit)
	c.update(errv, e.p.reset)
}

// run codes run mode from column x and returns the samples it covered.
func (e *jlsEnc) run(prev, cur []int, x int) int {
	w := e.p.width
	ra := cur[x-1]
	cnt := 0
	for x+cnt <= w && cur[x+cnt] == ra {
		cnt++
	}
	eol := x+cnt > w
	rest := cnt
	for rest >= 1<<jlsJ[e.runIndex] {
		e.put(1, 1)
		rest -= 1 << jlsJ[e.runIndex]
		if e.runIndex < 31 {
			e.runIndex++
		}
	}
	if eol {
		if rest > 0 {
			e.put(1, 1)
		}
		return cnt
	}
	e.put(0, 1)
	e.put(uint32(rest), uint(jlsJ[e.runIndex]))
	e.interruption(ra, prev[x+cnt], cur[x+cnt])
	if e.runIndex > 0 {
		e.runIndex--
	}
	return cnt + 1
}

func (e *jlsEnc) interruption(ra, rb, ix int) {
	t := 0
	if ra == rb {
		t = 1
	}
	var errv int
	if t == 1 {
		errv = ix - ra
	} else {
		errv = ix - rb
		if ra > rb {
			errv = -errv
		}
	}
	errv = e.modRange(errv)
	c := &e.ri[t]
	temp := c.a
	if t == 1 {
		temp += c.n >> 1
	}
	k := 0
	for c.n<<k < temp {
		k++
	}
	mp := 0
	if (k == 0 && errv > 0 && 2*c.nn < c.n) || (errv < 0 && 2*c.nn >= c.n) || (errv < 0 && k != 0) {
		mp = 1
	}
	absErr := errv
	if absErr < 0 {
		absErr = -absErr
	}
	m := 2*absErr - t - mp
	e.golomb(m, k, e.p.limit-jlsJ[e.runIndex]-1)
	c.updateRI(errv, m, t, e.p.reset)
}

// jlsImage makes a test image: flat areas (long runs, runs to the end of a
// line, run interruptions), smooth gradients, edges and noise up to the
// full range (escape codes).
func jlsImage(rng *rand.Rand, w, h, bits int) []int {
	maxv := 1<<bits - 1
	img := make([]int, w*h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			var v int
			switch {
			case y < h/4: // flat, with a step every few lines
				v = (y / 3 * 17) % (maxv + 1)
			case y < h/2: // smooth ramp
				v = (x*maxv/(w+1) + y) % (maxv + 1)
			case y < 3*h/4: // flat patches with sparse spikes
				v = maxv / 3
				if rng.IntN(40) == 0 {
					v = rng.IntN(maxv + 1)
				}
			default: // noise over the whole range
				v = rng.IntN(maxv + 1)
			}
			img[y*w+x] = v
		}
	}
	return img
}

// Round trips through the test encoder: 8, 12 and 16 bits, with and without
// a preset-parameters segment, odd sizes, every sample back exactly.
func TestJPEGLSRoundTrip(t *testing.T) {
	rng := rand.New(rand.NewPCG(71, 72))
	for _, tc := range []struct{ w, h, bits int }{{1, 1, 8}, {7, 5, 8}, {64, 48, 8}, {33, 40, 12}, {100, 37, 16}, {300, 9, 16}, {5, 200, 2}} {
		for _, preset := range []bool{false, true} {
			img := jlsImage(rng, tc.w, tc.h, tc.bits)
			code := jlsEncode(img, tc.w, tc.h, tc.bits, preset)
			bpp := 1
			if tc.bits > 8 {
				bpp = 2
			}
			dst := make([]byte, tc.w*tc.h*bpp)
			if err := decodeJPEGLS(code, tc.h, tc.w, bpp, dst); err != nil {
				t.Fatalf("%d×%d, %d bits, preset %v: %v", tc.w, tc.h, tc.bits, preset, err)
			}
			for i, want := range img {
				got := int(dst[i])
				if bpp == 2 {
					got = int(binary.LittleEndian.Uint16(dst[2*i:]))
				}
				if got != want {
					t.Fatalf("%d×%d, %d bits: sample %d (row %d) = %d, want %d", tc.w, tc.h, tc.bits, i, i/tc.w, got, want)
				}
			}
			t.Logf("%d×%d, %d bits, preset %v: %d samples in %d bytes", tc.w, tc.h, tc.bits, preset, len(img), len(code))
		}
	}
}

// The default thresholds of T.87 C.2.4.1.1.2 for NEAR = 0: for 16-bit
// samples T1, T2, T3 = 18, 67, 276 (the values the LSE segment of pydicom's
// MR_small_jpeg_ls_lossless.dcm states); for 8-bit samples 3, 7, 21 (the
// basic values, FACTOR 1).
func TestJPEGLSDefaultThresholds(t *testing.T) {
	for _, tc := range []struct{ bits, t1, t2, t3 int }{{16, 18, 67, 276}, {8, 3, 7, 21}, {12, 18, 67, 276}} {
		p := jlsParams{bits: tc.bits}
		if err := p.complete(); err != nil {
			t.Fatal(err)
		}
		if p.t1 != tc.t1 || p.t2 != tc.t2 || p.t3 != tc.t3 || p.reset != 64 {
			t.Errorf("%d bits: T1 %d T2 %d T3 %d RESET %d, want %d %d %d 64", tc.bits, p.t1, p.t2, p.t3, p.reset, tc.t1, tc.t2, tc.t3)
		}
	}
}

// Truncated and damaged streams give errors, never a panic.
func TestJPEGLSDamaged(t *testing.T) {
	rng := rand.New(rand.NewPCG(81, 82))
	img := jlsImage(rng, 40, 40, 12)
	code := jlsEncode(img, 40, 40, 12, true)
	dst := make([]byte, 40*40*2)
	for _, cut := range []int{0, 3, 10, 30, len(code) / 2, len(code) - 40} {
		if err := decodeJPEGLS(code[:cut], 40, 40, 2, dst); err == nil {
			t.Errorf("cut at %d of %d bytes: no error", cut, len(code))
		}
	}
	if err := decodeJPEGLS(code, 40, 41, 2, make([]byte, 40*41*2)); err == nil || !strings.Contains(err.Error(), "Columns 41") {
		t.Errorf("size mismatch: %v", err)
	}
	near := append([]byte(nil), code...)
	for i := 0; i+1 < len(near); i++ {
		if near[i] == 0xFF && near[i+1] == 0xDA {
			near[i+4+3] = 2 // NEAR = 2
			break
		}
	}
	if err := decodeJPEGLS(near, 40, 40, 2, dst); err == nil || !strings.Contains(err.Error(), "NEAR 2") {
		t.Errorf("near-lossless scan: %v", err)
	}
}

// FuzzJPEGLS decodes arbitrary data as a 16 × 16 frame: an error or a
// frame, never a panic or a hang.
func FuzzJPEGLS(f *testing.F) {
	rng := rand.New(rand.NewPCG(91, 92))
	f.Add(jlsEncode(jlsImage(rng, 16, 16, 8), 16, 16, 8, false))
	f.Add(jlsEncode(jlsImage(rng, 16, 16, 16), 16, 16, 16, true))
	f.Fuzz(func(t *testing.T, data []byte) {
		_ = decodeJPEGLS(data, 16, 16, 2, make([]byte, 16*16*2))
	})
}

// BenchmarkJPEGLS256 decodes one 256 × 256 12-bit slice.
func BenchmarkJPEGLS256(b *testing.B) {
	img := jlsImage(rand.New(rand.NewPCG(69, 70)), 256, 256, 12)
	code := jlsEncode(img, 256, 256, 12, false)
	dst := make([]byte, 256*256*2)
	b.SetBytes(int64(len(dst)))
	for i := 0; i < b.N; i++ {
		if err := decodeJPEGLS(code, 256, 256, 2, dst); err != nil {
			b.Fatal(err)
		}
	}
}
