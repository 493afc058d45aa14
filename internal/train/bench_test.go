package train

import "testing"

// BenchmarkStep times one training step of the demo architecture on a batch
// of 8 random cases (2 goroutines).
func BenchmarkStep(b *testing.B) {
	a := DefaultArch()
	n, err := NewNet(a, 1)
	if err != nil {
		b.Fatal(err)
	}
	set := blobSet(a, 8, 1)
	opt := NewAdam(0, nil)
	cfg := DefaultConfig(1)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := n.Step(opt, set, 1e-3, cfg); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkPredict times the exported model's forward pass on one case.
func BenchmarkPredict(b *testing.B) {
	a := DefaultArch()
	n, err := NewNet(a, 1)
	if err != nil {
		b.Fatal(err)
	}
	set := blobSet(a, 1, 1)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := n.Predict([][]float32{set[0].X}, 1); err != nil {
			b.Fatal(err)
		}
	}
}
