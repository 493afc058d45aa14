package graph

// mat is a strided matrix view: element (i, j) is d[i*rs+j*cs]. Transposed
// operands are views with the strides swapped.
type mat struct {
	d      []float32
	rs, cs int
}

// rowMajor is the view of an r×c row-major matrix with leading dimension ld.
func rowMajor(d []float32, ld int) mat { return mat{d: d, rs: ld, cs: 1} }

// t is the transposed view.
func (a mat) t() mat { return mat{d: a.d, rs: a.cs, cs: a.rs} }

const (
	gemmKC = 256 // depth of a packed block
	gemmMR = 4   // rows of the register tile
	gemmNR = 4   // columns of the register tile
)

// gemm computes C = A·B (or C += A·B when accumulate) for an m×k A and a k×n
// B into the row-major m×n C with leading dimension ldc. Operands are packed
// into 4-wide panels per block of depth gemmKC and multiplied with a 4×4
// register tile.
func gemm(m, n, k int, a, b mat, c []float32, ldc int, accumulate bool) {
	if m == 0 || n == 0 {
		return
	}
	if !accumulate {
		for i := 0; i < m; i++ {
			clear(c[i*ldc : i*ldc+n])
		}
	}
	if k == 0 {
		return
	}
	nPanels := (n + gemmNR - 1) / gemmNR
	kb0 := min(gemmKC, k)
	bp := make([]float32, nPanels*kb0*gemmNR)
	ap := make([]float32, kb0*gemmMR)
	var tile [gemmMR * gemmNR]float32
	for pc := 0; pc < k; pc += gemmKC {
		kb := min(gemmKC, k-pc)
		packB(b, pc, kb, n, bp)
		for ic := 0; ic < m; ic += gemmMR {
			mr := min(gemmMR, m-ic)
			packA(a, ic, mr, pc, kb, ap)
			for jp := 0; jp < nPanels; jp++ {
				jc := jp * gemmNR
				nr := min(gemmNR, n-jc)
				panel := bp[jp*kb*gemmNR : (jp+1)*kb*gemmNR]
				if mr == gemmMR && nr == gemmNR {
					kernel4x4(kb, ap, panel, c[ic*ldc+jc:], ldc)
					continue
				}
				tile = [gemmMR * gemmNR]float32{}
				kernel4x4(kb, ap, panel, tile[:], gemmNR)
				for i := 0; i < mr; i++ {
					row := c[(ic+i)*ldc+jc:]
					for j := 0; j < nr; j++ {
						row[j] += tile[i*gemmNR+j]
					}
				}
			}
		}
	}
}

// packB copies rows [pc, pc+kb) of B into column panels of width gemmNR:
// dst[(jp*kb+p)*gemmNR+jj] = B[pc+p][jp*gemmNR+jj], zero-padded.
func packB(b mat, pc, kb, n int, dst []float32) {
	nPanels := (n + gemmNR - 1) / gemmNR
	for jp := 0; jp < nPanels; jp++ {
		jc := jp * gemmNR
		nr := min(gemmNR, n-jc)
		out := dst[jp*kb*gemmNR : (jp+1)*kb*gemmNR]
		if b.cs == 1 && nr == gemmNR {
			for p := 0; p < kb; p++ {
				src := b.d[(pc+p)*b.rs+jc:]
				o := out[p*gemmNR : p*gemmNR+gemmNR]
				o[0], o[1], o[2], o[3] = src[0], src[1], src[2], src[3]
			}
			continue
		}
		for p := 0; p < kb; p++ {
			o := out[p*gemmNR : p*gemmNR+gemmNR]
			for jj := 0; jj < gemmNR; jj++ {
				if jj < nr {
					o[jj] = b.d[(pc+p)*b.rs+(jc+jj)*b.cs]
				} else {
					o[jj] = 0
				}
			}
		}
	}
}

// packA copies rows [ic, ic+mr) and columns [pc, pc+kb) of A interleaved:
// dst[p*gemmMR+ii] = A[ic+ii][pc+p], zero-padded to gemmMR rows.
func packA(a mat, ic, mr, pc, kb int, dst []float32) {
	for ii := 0; ii < gemmMR; ii++ {
		if ii >= mr {
			for p := 0; p < kb; p++ {
				dst[p*gemmMR+ii] = 0
			}
			continue
		}
		base := (ic+ii)*a.rs + pc*a.cs
		if a.cs == 1 {
			src := a.d[base : base+kb]
			for p, v := range src {
				dst[p*gemmMR+ii] = v
			}
			continue
		}
		for p := 0; p < kb; p++ {
			dst[p*gemmMR+ii] = a.d[base+p*a.cs]
		}
	}
}

// kernel4x4 adds the product of a packed 4×kb A panel and a packed kb×4 B
// panel to the 4×4 block of c at leading dimension ldc.
func kernel4x4(kb int, a, b []float32, c []float32, ldc int) {
	var c00, c01, c02, c03 float32
	var c10, c11, c12, c13 float32
	var c20, c21, c22, c23 float32
	var c30, c31, c32, c33 float32
	a = a[:kb*4]
	b = b[:kb*4]
	for p := 0; p+4 <= len(a) && p+4 <= len(b); p += 4 {
		av := a[p : p+4 : p+4]
		bv := b[p : p+4 : p+4]
		a0, a1, a2, a3 := av[0], av[1], av[2], av[3]
		b0, b1, b2, b3 := bv[0], bv[1], bv[2], bv[3]
		c00 += a0 * b0
		c01 += a0 * b1
		c02 += a0 * b2
		c03 += a0 * b3
		c10 += a1 * b0
		c11 += a1 * b1
		c12 += a1 * b2
		c13 += a1 * b3
		c20 += a2 * b0
		c21 += a2 * b1
		c22 += a2 * b2
		c23 += a2 * b3
		c30 += a3 * b0
		c31 += a3 * b1
		c32 += a3 * b2
		c33 += a3 * b3
	}
	r := c[0:4:4]
	r[0] += c00
	r[1] += c01
	r[2] += c02
	r[3] += c03
	r = c[ldc : ldc+4 : ldc+4]
	r[0] += c10
	r[1] += c11
	r[2] += c12
	r[3] += c13
	r = c[2*ldc : 2*ldc+4 : 2*ldc+4]
	r[0] += c20
	r[1] += c21
	r[2] += c22
	r[3] += c23
	r = c[3*ldc : 3*ldc+4 : 3*ldc+4]
	r[0] += c30
	r[1] += c31
	r[2] += c32
	r[3] += c33
}

// gemmParallel splits the columns of C over workers.
func gemmParallel(workers, m, n, k int, a, b mat, c []float32, ldc int, accumulate bool) {
	const minCols = 64
	chunks := min(workers, max(1, n/minCols))
	if chunks <= 1 || m*n*k < 1<<16 {
		gemm(m, n, k, a, b, c, ldc, accumulate)
		return
	}
	per := (n + chunks - 1) / chunks
	per = (per + gemmNR - 1) / gemmNR * gemmNR
	parallel(workers, chunks, func(i int) {
		j0 := i * per
		if j0 >= n {
			return
		}
		j1 := min(n, j0+per)
		bv := mat{d: b.d[j0*b.cs:], rs: b.rs, cs: b.cs}
		gemm(m, j1-j0, k, a, bv, c[j0:], ldc, accumulate)
	})
}
