package phantom

import (
	"path/filepath"
	"testing"
)

// BenchmarkGenerate renders one full-size (1 mm, 160×192×160) case on one
// goroutine, without writing it.
func BenchmarkGenerate(b *testing.B) {
	for i := 0; i < b.N; i++ {
		if _, err := Generate(1, i, Options{Workers: 1}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.Elapsed().Milliseconds())/float64(b.N), "ms/case")
}

// BenchmarkWriteCohort100 writes the 100-case full-size cohort (NIfTI scan
// and mask for each, DICOM for every fifth) with all CPUs, as
// `brightfold demo cohort DIR --n 100` does. Target: well under a minute on
// 2 cores.
func BenchmarkWriteCohort100(b *testing.B) {
	for i := 0; i < b.N; i++ {
		dir := filepath.Join(b.TempDir(), "cohort")
		if _, err := WriteCohort(dir, WriteOptions{N: 100, Seed: 1}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(b.Elapsed().Seconds()/float64(b.N), "s/cohort")
}
