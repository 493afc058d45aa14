//go:build !amd64

package exec

// kernel4x16 adds the product of a packed 4×kb A panel and a packed kb×16 B
// panel to the 4×16 block of c (leading dimension ldc).
func kernel4x16(kb int, a, b, c []float32, ldc int) { kernel4x16Go(kb, a, b, c, ldc) }
