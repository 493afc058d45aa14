package phantom

import (
	"path/filepath"
	"testing"
)

func BenchmarkZZCohort10(b *testing.B) {
	for i := 0; i < b.N; i++ {
		dir := filepath.Join(b.TempDir(), "cohort")
		if _, err := WriteCohort(dir, WriteOptions{N: 10, Seed: 1}); err != nil {
			b.Fatal(err)
		}
	}
}
