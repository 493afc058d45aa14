package viewer

import (
	"math"
	"testing"

	"brightfold/internal/volume"
)

// FuzzRender feeds odd geometry (tiny or lopsided grids, rotations, flips,
// extreme spacings and points, NaN values) through Scene, Frame, Render and
// the readout: they must refuse or render, never panic or allocate beyond
// MaxSide².
func FuzzRender(f *testing.F) {
	f.Add(uint8(4), uint8(5), uint8(6), 1.0, 1.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0, uint8(0))
	f.Add(uint8(1), uint8(1), uint8(1), 1e-6, 1e6, 3.0, 90.0, 1e9, -1e9, 2.0, 0.3, uint8(7))
	f.Add(uint8(9), uint8(2), uint8(3), -2.0, 0.5, -7.0, 45.0, 3.0, 2.0, 1.0, -4.0, uint8(3))
	f.Fuzz(func(t *testing.T, n0, n1, n2 uint8, s0, s1, s2, deg, x, y, z, px float64, flags uint8) {
		dims := [3]int{int(n0%12) + 1, int(n1%12) + 1, int(n2%12) + 1}
		a := volume.Diag([3]float64{s0, s1, s2}, [3]float64{x / 3, y / 5, z / 7})
		th := deg * math.Pi / 180
		rot := volume.Affine{{math.Cos(th), 0, math.Sin(th), 0}, {0, 1, 0, 0}, {-math.Sin(th), 0, math.Cos(th), 0}, {0, 0, 0, 1}}
		v, err := volume.New(dims, rot.Mul(a))
		if err != nil {
			return
		}
		for i := range v.Data {
			v.Data[i] = float32(i%7) - 2
		}
		if flags&8 != 0 {
			v.Data[0] = float32(math.NaN())
		}
		s, err := NewScene(v)
		if err != nil {
			return
		}
		om, err := NewOverlayMap(s, v, "")
		if err != nil {
			t.Fatalf("own grid refused as overlay: %v", err)
		}
		pl := Planes()[int(flags)%3]
		c := Convention((flags >> 2) & 1)
		fr := s.Frame(pl, [3]float64{x, y, z}, c, px)
		if fr.Width < 1 || fr.Height < 1 || fr.Width > MaxSide || fr.Height > MaxSide {
			t.Fatalf("frame %dx%d", fr.Width, fr.Height)
		}
		if fr.Width*fr.Height > 1<<16 {
			return // a large but valid frame: skip rendering to keep fuzzing fast
		}
		st := OverlayStyle{Opacity: 0.5, Signed: flags&16 != 0, Threshold: Threshold{Value: px, Percentile: flags&32 != 0}}
		if _, err := s.Render(fr, Layers{Window: Window{Center: x, Width: px}, Interp: Interp(flags >> 6 & 1), Overlay: om, Style: st}); err != nil {
			t.Fatalf("render: %v", err)
		}
		_ = s.ReadoutAt(fr, x, y, om).String()
		_ = s.Crosshair(fr, [3]float64{x, y, z}).String()
		_ = s.StepSlice([3]float64{x, y, z}, pl, int(flags)-128)
		_ = fr.Letters()
	})
}
