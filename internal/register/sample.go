package register

// sampleGrad interpolates im trilinearly at voxel coordinate (x, y, z) and
// returns the value and its derivative along each voxel axis; ok is false
// outside [0, n−1] on any axis (the span of the voxel centres). The
// derivative is that of the trilinear interpolant, exact between voxel
// centres, so the metric gradients below are analytic.
func (im *image) sampleGrad(x, y, z float64) (v float64, g [3]float64, ok bool) {
	nx, ny, nz := im.dims[0], im.dims[1], im.dims[2]
	i, fx, okx := cell(x, nx)
	j, fy, oky := cell(y, ny)
	k, fz, okz := cell(z, nz)
	if !(okx && oky && okz) {
		return 0, g, false
	}
	// cell() keeps i ≤ n−2 when n ≥ 2; axes of one voxel have no upper neighbour
	di, dj, dk := 1, nx, nx*ny
	if nx == 1 {
		di = 0
	}
	if ny == 1 {
		dj = 0
	}
	if nz == 1 {
		dk = 0
	}
	p := i + nx*(j+ny*k)
	d := im.data
	c000, c100 := float64(d[p]), float64(d[p+di])
	c010, c110 := float64(d[p+dj]), float64(d[p+dj+di])
	c001, c101 := float64(d[p+dk]), float64(d[p+dk+di])
	c011, c111 := float64(d[p+dk+dj]), float64(d[p+dk+dj+di])
	// along x first
	a00 := c000 + fx*(c100-c000)
	a10 := c010 + fx*(c110-c010)
	a01 := c001 + fx*(c101-c001)
	a11 := c011 + fx*(c111-c011)
	b0 := a00 + fy*(a10-a00)
	b1 := a01 + fy*(a11-a01)
	v = b0 + fz*(b1-b0)
	g[2] = b1 - b0
	g[1] = (1-fz)*(a10-a00) + fz*(a11-a01)
	gy0 := (1-fy)*(c100-c000) + fy*(c110-c010)
	gy1 := (1-fy)*(c101-c001) + fy*(c111-c011)
	g[0] = (1-fz)*gy0 + fz*gy1
	return v, g, true
}

// cell splits coordinate x on an axis of n voxels into the lower voxel index
// (at most n−2) and the fraction towards the next one.
func cell(x float64, n int) (int, float64, bool) {
	const tol = 1e-6
	top := float64(n - 1)
	if !(x >= -tol && x <= top+tol) {
		return 0, 0, false
	}
	if n == 1 {
		return 0, 0, true
	}
	if x <= 0 {
		return 0, 0, true
	}
	if x >= top {
		return n - 2, 1, true
	}
	i := int(x)
	return i, x - float64(i), true
}
