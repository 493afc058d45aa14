package exec

import "golang.org/x/sys/cpu"

// hasAVX2FMA is fixed at start-up from the CPU's feature flags.
var hasAVX2FMA = cpu.X86.HasAVX2 && cpu.X86.HasFMA

//go:noescape
func kernel4x16AVX2(kb int, a, b, c *float32, ldc int)

// kernel4x16 adds the product of a packed 4×kb A panel and a packed kb×16 B
// panel to the 4×16 block of c (leading dimension ldc), with AVX2 and FMA
// when the CPU has them.
func kernel4x16(kb int, a, b, c []float32, ldc int) {
	if hasAVX2FMA {
		// Bounds the assembly relies on.
		_ = a[4*kb-1]
		_ = b[16*kb-1]
		_ = c[3*ldc+15]
		kernel4x16AVX2(kb, &a[0], &b[0], &c[0], ldc)
		return
	}
	kernel4x16Go(kb, a, b, c, ldc)
}
