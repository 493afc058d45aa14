package register

import (
	"math"

	"brightfold/internal/volume"
)

// params maps an optimiser vector to a transform y = L·(x − c) + c + t
// around the template centre c, starting from (l0, t0). Rotations and
// matrix entries are multiplied by radius (the template's radius of
// gyration, mm), so that a unit step of any parameter moves the head by
// about a millimetre: the optimiser then sees a well-scaled problem.
type params struct {
	dof    int // 6 (rigid: three Euler angles and a shift) or 12 (affine)
	centre [3]float64
	radius float64
	l0     [3][3]float64
	t0     [3]float64
}

func newParams(dof int, start volume.Affine, centre [3]float64, radius float64) *params {
	p := &params{dof: dof, centre: centre, radius: radius}
	for r := 0; r < 3; r++ {
		var lc float64
		for c := 0; c < 3; c++ {
			p.l0[r][c] = start[r][c]
			lc += start[r][c] * centre[c]
		}
		// A(c) = L·c + a = c + t
		p.t0[r] = lc + start[r][3] - centre[r]
	}
	return p
}

func (p *params) size() int { return p.dof }

// linear returns L and t for the vector x.
func (p *params) linear(x []float64) ([3][3]float64, [3]float64) {
	var l [3][3]float64
	var t [3]float64
	for r := 0; r < 3; r++ {
		t[r] = p.t0[r] + x[p.dof-3+r]
	}
	if p.dof == 6 {
		rot := eulerRotation(x[0]/p.radius, x[1]/p.radius, x[2]/p.radius)
		l = mul33(rot, p.l0)
	} else {
		for r := 0; r < 3; r++ {
			for c := 0; c < 3; c++ {
				l[r][c] = p.l0[r][c] + x[3*r+c]/p.radius
			}
		}
	}
	return l, t
}

// affine returns the 4×4 transform of x.
func (p *params) affine(x []float64) volume.Affine {
	l, t := p.linear(x)
	a := volume.Identity()
	for r := 0; r < 3; r++ {
		var lc float64
		for c := 0; c < 3; c++ {
			a[r][c] = l[r][c]
			lc += l[r][c] * p.centre[c]
		}
		a[r][3] = p.centre[r] + t[r] - lc
	}
	return a
}

// chain converts the gradient with respect to (L, t) to one with respect to x.
func (p *params) chain(x []float64, g gradient, out []float64) {
	for r := 0; r < 3; r++ {
		out[p.dof-3+r] = g.gT[r]
	}
	if p.dof == 12 {
		for r := 0; r < 3; r++ {
			for c := 0; c < 3; c++ {
				out[3*r+c] = g.gL[r][c] / p.radius
			}
		}
		return
	}
	ax, ay, az := x[0]/p.radius, x[1]/p.radius, x[2]/p.radius
	for k := 0; k < 3; k++ {
		d := mul33(eulerDerivative(ax, ay, az, k), p.l0)
		var s float64
		for r := 0; r < 3; r++ {
			for c := 0; c < 3; c++ {
				s += g.gL[r][c] * d[r][c]
			}
		}
		out[k] = s / p.radius
	}
}

func rotX(a float64) [3][3]float64 {
	c, s := math.Cos(a), math.Sin(a)
	return [3][3]float64{{1, 0, 0}, {0, c, -s}, {0, s, c}}
}

func rotY(a float64) [3][3]float64 {
	c, s := math.Cos(a), math.Sin(a)
	return [3][3]float64{{c, 0, s}, {0, 1, 0}, {-s, 0, c}}
}

func rotZ(a float64) [3][3]float64 {
	c, s := math.Cos(a), math.Sin(a)
	return [3][3]float64{{c, -s, 0}, {s, c, 0}, {0, 0, 1}}
}

// eulerRotation is Rz(az)·Ry(ay)·Rx(ax).
func eulerRotation(ax, ay, az float64) [3][3]float64 {
	return mul33(rotZ(az), mul33(rotY(ay), rotX(ax)))
}

// eulerDerivative is ∂(Rz·Ry·Rx)/∂a_k for k = 0 (x), 1 (y), 2 (z).
func eulerDerivative(ax, ay, az float64, k int) [3][3]float64 {
	x, y, z := rotX(ax), rotY(ay), rotZ(az)
	switch k {
	case 0:
		cx, sx := math.Cos(ax), math.Sin(ax)
		x = [3][3]float64{{0, 0, 0}, {0, -sx, -cx}, {0, cx, -sx}}
	case 1:
		cy, sy := math.Cos(ay), math.Sin(ay)
		y = [3][3]float64{{-sy, 0, cy}, {0, 0, 0}, {-cy, 0, -sy}}
	default:
		cz, sz := math.Cos(az), math.Sin(az)
		z = [3][3]float64{{-sz, -cz, 0}, {cz, -sz, 0}, {0, 0, 0}}
	}
	return mul33(z, mul33(y, x))
}

func mul33(a, b [3][3]float64) [3][3]float64 {
	var c [3][3]float64
	for r := 0; r < 3; r++ {
		for k := 0; k < 3; k++ {
			c[r][k] = a[r][0]*b[0][k] + a[r][1]*b[1][k] + a[r][2]*b[2][k]
		}
	}
	return c
}
