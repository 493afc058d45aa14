package nifti

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"math"
	"testing"
)

// encodeIntsMinMax is the NIfTI writer's first quantiser, one voxel at a
// time through math.Min and math.Max. encodeInts must give the same bytes,
// scl_slope and scl_inter (bit for bit) and the same error.
func encodeIntsMinMax(data []float32, lo, hi float64, size int) (body []byte, slope, inter float32, err error) {
	mn, mx := math.Inf(1), math.Inf(-1)
	integral := true
	for i, x := range data {
		f := float64(x)
		if math.IsNaN(f) || math.IsInf(f, 0) {
			return nil, 0, 0, fmt.Errorf("voxel %d is %v; an integer datatype cannot hold it", i, f)
		}
		mn, mx = math.Min(mn, f), math.Max(mx, f)
		if f != math.Trunc(f) {
			integral = false
		}
	}
	slope, inter = 1, 0
	if len(data) > 0 && !(integral && mn >= lo && mx <= hi) {
		if mx > mn {
			slope = float32((mx - mn) / (hi - lo))
		}
		inter = float32(mn - lo*float64(slope))
	}
	s, c := float64(slope), float64(inter)
	body = make([]byte, size*len(data))
	for i, x := range data {
		q := math.Round((float64(x) - c) / s)
		q = math.Max(lo, math.Min(hi, q))
		if size == 1 {
			body[i] = uint8(q)
		} else {
			binary.LittleEndian.PutUint16(body[2*i:], uint16(int16(q)))
		}
	}
	return body, slope, inter, nil
}

// encodeSame reports how encodeInts and encodeIntsMinMax differ on data, or "".
func encodeSame(data []float32) string {
	for _, tc := range []struct {
		lo, hi float64
		size   int
	}{{math.MinInt16, math.MaxInt16, 2}, {0, math.MaxUint8, 1}} {
		b1, s1, i1, e1 := encodeInts(data, tc.lo, tc.hi, tc.size)
		b2, s2, i2, e2 := encodeIntsMinMax(data, tc.lo, tc.hi, tc.size)
		switch {
		case (e1 == nil) != (e2 == nil) || (e1 != nil && e1.Error() != e2.Error()):
			return fmt.Sprintf("size %d: error %v, first quantiser %v", tc.size, e1, e2)
		case math.Float32bits(s1) != math.Float32bits(s2) || math.Float32bits(i1) != math.Float32bits(i2):
			return fmt.Sprintf("size %d: slope %g inter %g, first quantiser %g %g", tc.size, s1, i1, s2, i2)
		case !bytes.Equal(b1, b2):
			return fmt.Sprintf("size %d: voxel bytes differ", tc.size)
		}
	}
	return ""
}

// TestEncodeIntsSameBytes: the block-parallel quantiser writes the same
// bytes as the first one on a head-like volume (several blocks), on its
// scaled and label-map variants and on edge cases: signed zeros (the sign of
// scl_inter), a range that scales to slope 1 and inter 0, a non-finite
// voxel in a later block, out-of-range integers, a constant volume.
func TestEncodeIntsSameBytes(t *testing.T) {
	head := niiHeadLike([3]int{64, 72, 60})
	if numBlocks(len(head.Data)) < 2 {
		t.Fatalf("%d voxels is one block; the test needs several", len(head.Data))
	}
	scaled, labels, late := head.Clone(), head.Clone(), head.Clone()
	for i, x := range head.Data {
		scaled.Data[i] = x*0.37 - 11.125
		labels.Data[i] = float32(int(x) % 4)
	}
	late.Data[len(late.Data)-3] = float32(math.Inf(-1))
	late.Data[len(late.Data)-1] = float32(math.NaN())
	negZero := float32(math.Copysign(0, -1))
	cases := map[string][]float32{
		"head":          head.Data,
		"head scaled":   scaled.Data,
		"labels":        labels.Data,
		"late NaN":      late.Data,
		"empty":         {},
		"constant":      {7.5, 7.5, 7.5},
		"-0 min":        {negZero, 0.5, 300},
		"+0 then -0":    {0, negZero, 0.25, 1000},
		"-0 integral":   {negZero, 3, 2},
		"slope 1":       {0, 0.5, 255},
		"wide integers": {-70000, 5, 70000},
		"tiny range":    {1, math.Nextafter32(1, 2)},
		"huge":          {-3e38, 3e38, 0},
		"first +Inf":    {float32(math.Inf(1)), 1},
	}
	for name, data := range cases {
		if d := encodeSame(data); d != "" {
			t.Errorf("%s: %s", name, d)
		}
	}
}

// FuzzEncodeInts: on any float32 values (NaN, infinities, subnormals and
// signed zeros included) the two quantisers agree.
func FuzzEncodeInts(f *testing.F) {
	f.Add([]byte{0, 0, 0, 0x80, 0, 0, 0, 0x3f, 0, 0, 0x7f, 0x43})
	f.Add([]byte{0, 0, 0xc0, 0x7f, 1, 2, 3})
	f.Fuzz(func(t *testing.T, raw []byte) {
		data := make([]float32, len(raw)/4)
		for i := range data {
			data[i] = math.Float32frombits(binary.LittleEndian.Uint32(raw[4*i:]))
		}
		if d := encodeSame(data); d != "" {
			t.Errorf("%v: %s", data, d)
		}
	})
}
