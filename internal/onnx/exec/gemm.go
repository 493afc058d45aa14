package exec

import "brightfold/internal/parallel"

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
	gemmNR = 16  // columns of the register tile
)

// gemm computes C = A·B (or C += A·B when accumulate) for an m×k A and a k×n
// B into the row-major m×n C with leading dimension ldc. Operands are packed
// into panels (4 rows of A, 16 columns of B) per block of depth gemmKC and
// multiplied with a 4×16 register tile.
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
	bp := make([]float32, nPanels*min(gemmKC, k)*gemmNR)
	for pc := 0; pc < k; pc += gemmKC {
		kb := min(gemmKC, k-pc)
		packB(b, pc, kb, n, bp)
		multiplyPanels(m, n, kb, a, pc, bp, c, ldc)
	}
}

// gemmPackedB adds A·B to C (or stores it, when !accumulate) for an m×k A
// and a B that the caller has already packed into column panels of width
// gemmNR over the full depth: bp[(jp*k+p)*gemmNR+jj] = B[p][jp*gemmNR+jj].
func gemmPackedB(m, n, k int, a mat, bp []float32, c []float32, ldc int, accumulate bool) {
	if !accumulate {
		for i := 0; i < m; i++ {
			clear(c[i*ldc : i*ldc+n])
		}
	}
	if m == 0 || n == 0 || k == 0 {
		return
	}
	multiplyPanels(m, n, k, a, 0, bp, c, ldc)
}

// multiplyPanels adds A[:, pc:pc+kb]·B to C for B packed in panels of depth
// kb, packing A four rows at a time.
func multiplyPanels(m, n, kb int, a mat, pc int, bp []float32, c []float32, ldc int) {
	nPanels := (n + gemmNR - 1) / gemmNR
	ap := make([]float32, kb*gemmMR)
	var tile [gemmMR * gemmNR]float32
	for ic := 0; ic < m; ic += gemmMR {
		mr := min(gemmMR, m-ic)
		packA(a, ic, mr, pc, kb, ap)
		for jp := 0; jp < nPanels; jp++ {
			jc := jp * gemmNR
			nr := min(gemmNR, n-jc)
			panel := bp[jp*kb*gemmNR : (jp+1)*kb*gemmNR]
			if mr == gemmMR && nr == gemmNR {
				kernel4x16(kb, ap, panel, c[ic*ldc+jc:], ldc)
				continue
			}
			tile = [gemmMR * gemmNR]float32{}
			kernel4x16(kb, ap, panel, tile[:], gemmNR)
			for i := 0; i < mr; i++ {
				row := c[(ic+i)*ldc+jc:]
				for j := 0; j < nr; j++ {
					row[j] += tile[i*gemmNR+j]
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
				copy(out[p*gemmNR:p*gemmNR+gemmNR], b.d[(pc+p)*b.rs+jc:])
			}
			continue
		}
		if nr < gemmNR {
			clear(out)
		}
		// Column by column, so that a transposed operand (rs == 1) is read
		// contiguously.
		for jj := 0; jj < nr; jj++ {
			base := pc*b.rs + (jc+jj)*b.cs
			for p := 0; p < kb; p++ {
				out[p*gemmNR+jj] = b.d[base+p*b.rs]
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

// kernel4x16Go is the portable register-tiled kernel behind kernel4x16:
// four 4×4 sub-tiles, each with its accumulators in registers.
func kernel4x16Go(kb int, a, b, c []float32, ldc int) {
	for q := 0; q < gemmNR; q += 4 {
		var c00, c01, c02, c03 float32
		var c10, c11, c12, c13 float32
		var c20, c21, c22, c23 float32
		var c30, c31, c32, c33 float32
		for p := 0; p < kb; p++ {
			av := a[p*4 : p*4+4 : p*4+4]
			bv := b[p*gemmNR+q : p*gemmNR+q+4 : p*gemmNR+q+4]
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
		addRow(c[q:], c00, c01, c02, c03)
		addRow(c[ldc+q:], c10, c11, c12, c13)
		addRow(c[2*ldc+q:], c20, c21, c22, c23)
		addRow(c[3*ldc+q:], c30, c31, c32, c33)
	}
}

func addRow(r []float32, v0, v1, v2, v3 float32) {
	r = r[:4:4]
	r[0] += v0
	r[1] += v1
	r[2] += v2
	r[3] += v3
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
	parallel.Each(chunks, workers, func(_, i int) {
		j0 := i * per
		if j0 >= n {
			return
		}
		j1 := min(n, j0+per)
		bv := mat{d: b.d[j0*b.cs:], rs: b.rs, cs: b.cs}
		gemm(m, j1-j0, k, a, bv, c[j0:], ldc, accumulate)
	})
}
