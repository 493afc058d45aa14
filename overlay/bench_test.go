package overlay

import (
	"context"
	"testing"
	"time"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/onnx"
)

// benchSetup loads the demo model folder with its session and one prepared
// pattern-positive phantom (1 mm).
func benchSetup(b testing.TB) (*Explainer, *inference.Session, *preprocess.Tensor) {
	b.Helper()
	bd := demoModelFolder(b)
	s := testSession(b, bd)
	ex, err := New(bd, s)
	if err != nil {
		b.Fatal(err)
	}
	_, pr := positiveCase(b, bd.Card, 0, 1)
	return ex, s, pr.Tensor
}

// BenchmarkLRP times the composite LRP map against one forward pass of the
// Go executor on the same input, alternating the two in each iteration
// (goal: ratio ≤ 3).
func BenchmarkLRP(b *testing.B) {
	ex, _, in := benchSetup(b)
	x := graphInput(in)
	feed := map[string]*onnx.Tensor{ex.input: x}
	var tf, tl time.Duration
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		t0 := time.Now()
		if _, err := ex.exec.Forward(feed); err != nil {
			b.Fatal(err)
		}
		t1 := time.Now()
		if _, err := ex.Compute(context.Background(), LRP, in, Options{}); err != nil {
			b.Fatal(err)
		}
		tf, tl = tf+t1.Sub(t0), tl+time.Since(t1)
	}
	n := float64(b.N)
	b.ReportMetric(tl.Seconds()*1e3/n, "lrp_ms")
	b.ReportMetric(tf.Seconds()*1e3/n, "forward_ms")
	b.ReportMetric(tl.Seconds()/tf.Seconds(), "ratio_vs_forward")
}

// bareORT returns bare ONNX Runtime passes per second on the input, in
// batches of the given size, measured over about a second.
func bareORT(b *testing.B, s *inference.Session, in *preprocess.Tensor, batch int) float64 {
	b.Helper()
	ts := make([]*preprocess.Tensor, batch)
	for i := range ts {
		ts[i] = in
	}
	if _, err := s.Run(ts); err != nil { // warm-up
		b.Fatal(err)
	}
	n, t0 := 0, time.Now()
	for time.Since(t0) < time.Second {
		if _, err := s.Run(ts); err != nil {
			b.Fatal(err)
		}
		n += batch
	}
	return float64(n) / time.Since(t0).Seconds()
}

// BenchmarkIntegratedGradients times integrated gradients at m = 64 on the
// Go executor (forward and backward per step) and reports its passes per
// second beside bare ONNX Runtime forward passes per second in the same
// process.
func BenchmarkIntegratedGradients(b *testing.B) {
	ex, s, in := benchSetup(b)
	benchSlow(b, ex, s, in, IntegratedGradients, Options{Steps: 64})
}

// BenchmarkOcclusion times occlusion with the default cube (8 voxels,
// stride 4) through ONNX Runtime and reports its passes per second beside
// bare ONNX Runtime passes per second in the same process, in the same
// batches.
func BenchmarkOcclusion(b *testing.B) {
	ex, s, in := benchSetup(b)
	benchSlow(b, ex, s, in, Occlusion, Options{})
}

func benchSlow(b *testing.B, ex *Explainer, s *inference.Session, in *preprocess.Tensor, m Method, opt Options) {
	var total time.Duration
	passes := 0
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		t0 := time.Now()
		mp, err := ex.Compute(context.Background(), m, in, opt)
		if err != nil {
			b.Fatal(err)
		}
		total += time.Since(t0)
		passes += mp.Passes
	}
	b.StopTimer()
	rate := float64(passes) / total.Seconds()
	ort := bareORT(b, s, in, opt.withDefaults().Batch)
	b.ReportMetric(total.Seconds()/float64(b.N), "s/map")
	b.ReportMetric(rate, "passes/s")
	b.ReportMetric(ort, "ort_passes/s")
	b.ReportMetric(rate/ort, "ratio_vs_ort")
}
