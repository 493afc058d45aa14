package viewer

import (
	"image"
	"testing"

	"brightfold/internal/cputime"
	"brightfold/internal/volume"
)

// benchScene is a 1 mm head phantom with a signed blob map, dims d.
func benchScene(b *testing.B, d [3]int) (*Scene, *OverlayMap) {
	v := headPhantom(b, d, [3]float64{1, 1, 1})
	s, err := NewScene(v)
	if err != nil {
		b.Fatal(err)
	}
	om, err := NewOverlayMap(s, blobMap(b, v), "a.u.")
	if err != nil {
		b.Fatal(err)
	}
	return s, om
}

func benchRender(b *testing.B, d [3]int, pl Plane, interp Interp, overlay bool) {
	s, om := benchScene(b, d)
	f := s.Frame(pl, s.Center(), Radiological, 0)
	if f.Width != 256 || f.Height != 256 {
		b.Fatalf("frame %dx%d, want 256x256", f.Width, f.Height)
	}
	l := Layers{Window: s.DefaultWindow(), Interp: interp}
	if overlay {
		l.Overlay, l.Style = om, OverlayStyle{Opacity: 0.5, Threshold: Threshold{Value: 50, Percentile: true}, Signed: true}
	}
	dst := image.NewRGBA(image.Rect(0, 0, f.Width, f.Height))
	b.ResetTimer()
	cpu0 := cputime.Seconds()
	for i := 0; i < b.N; i++ {
		if err := s.RenderInto(dst, f, l); err != nil {
			b.Fatal(err)
		}
	}
	reportCPU(b, cpu0)
}

// reportCPU adds the process CPU time per operation since cpu0 ("cpu-ns/op"):
// wall time per operation rises when other jobs share the cores, CPU time
// much less. The render loop is single-threaded, so the two agree on an idle
// machine.
func reportCPU(b *testing.B, cpu0 float64) {
	if d := cputime.Seconds() - cpu0; d > 0 {
		b.ReportMetric(d*1e9/float64(b.N), "cpu-ns/op")
	}
}

// Goal: one 256×256 slice with overlay in under 2 ms.
func BenchmarkRenderAxial256Overlay(b *testing.B) {
	benchRender(b, [3]int{256, 256, 64}, Axial, Nearest, true)
}

func BenchmarkRenderAxial256OverlayLinear(b *testing.B) {
	benchRender(b, [3]int{256, 256, 64}, Axial, Linear, true)
}

// Sagittal reads across the slowest-varying axes (worst for the cache).
func BenchmarkRenderSagittal256Overlay(b *testing.B) {
	benchRender(b, [3]int{64, 256, 256}, Sagittal, Nearest, true)
}

func BenchmarkRenderAxial256ScanOnly(b *testing.B) {
	benchRender(b, [3]int{256, 256, 64}, Axial, Nearest, false)
}

// BenchmarkReferenceCopySlice is the floor the ratios are read against: a
// direct-indexed copy of one 256×256 slice into grey pixels, no geometry,
// no window function, no overlay.
func BenchmarkReferenceCopySlice(b *testing.B) {
	v, _ := volume.New([3]int{256, 256, 64}, volume.Identity())
	dst := image.NewRGBA(image.Rect(0, 0, 256, 256))
	b.ResetTimer()
	cpu0 := cputime.Seconds()
	defer reportCPU(b, cpu0)
	for n := 0; n < b.N; n++ {
		for j := 0; j < 256; j++ {
			for i := 0; i < 256; i++ {
				g := uint8(v.Data[v.Index(i, j, 32)])
				o := 4 * (i + 256*j)
				dst.Pix[o], dst.Pix[o+1], dst.Pix[o+2], dst.Pix[o+3] = g, g, g, 255
			}
		}
	}
}

func BenchmarkNewScene256Cubed(b *testing.B) {
	v := headPhantom(b, [3]int{256, 256, 256}, [3]float64{1, 1, 1})
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := NewScene(v); err != nil {
			b.Fatal(err)
		}
	}
}
