package phantom

import (
	"math"
	"math/rand/v2"
)

// shapeDraw holds the random parts of one head, drawn once per subject.
type shapeDraw struct {
	axes        [4]float64 // brain hull semi-axes x, y, z superior, z inferior (mm, standard head)
	taper       float64    // relative change of the x semi-axis from back to front
	angles      [3]float64 // head rotation about x, y, z (radians)
	trans       [3]float64 // head position (mm)
	layers      [5]float64 // CSF gap, inner table, diploë, outer table, scalp (mm)
	thickness   float64    // cortical thickness at age 55 (mm)
	sulcusDepth float64    // mm
	ventSize    float64    // individual ventricle size factor
	mtlSize     float64    // individual medial temporal size factor
	jitter      [8][3]float64
	fold        field // gyral folding, wavelengths 18–30 mm
	low         field // thickness and structure variation, 40–80 mm
	shape       field // head shape, 90–180 mm
	bias        [9]float64
	gain        float64 // per-scan intensity scale jitter
	contrast    float64 // per-scan grey/white contrast jitter
}

func drawShape(r *rand.Rand) shapeDraw {
	var d shapeDraw
	std := [4]float64{58, 72, 54, 42}
	for i := range d.axes {
		d.axes[i] = std[i] * (1 + 0.025*r.NormFloat64())
	}
	d.taper = 0.06 + 0.02*r.NormFloat64()
	deg := math.Pi / 180
	d.angles = [3]float64{2.5 * deg * r.NormFloat64(), 2 * deg * r.NormFloat64(), 2 * deg * r.NormFloat64()}
	for i := range d.trans {
		d.trans[i] = 2 * r.NormFloat64()
	}
	std5 := [5]float64{1.6, 1.6, 2.8, 1.8, 5.5}
	for i := range d.layers {
		d.layers[i] = std5[i] * clamp(1+0.1*r.NormFloat64(), 0.7, 1.3)
	}
	d.thickness = clamp(2.7+0.12*r.NormFloat64(), 2.3, 3.1)
	d.sulcusDepth = clamp(13+1.2*r.NormFloat64(), 10, 16)
	d.ventSize = math.Exp(0.10 * r.NormFloat64())
	d.mtlSize = math.Exp(0.05 * r.NormFloat64())
	for i := range d.jitter {
		for j := range d.jitter[i] {
			d.jitter[i][j] = clamp(r.NormFloat64(), -2.5, 2.5)
		}
	}
	d.fold = newField(r, 20, 18, 30)
	d.low = newField(r, 5, 40, 80)
	d.shape = newField(r, 5, 90, 180)
	for i := range d.bias {
		d.bias[i] = r.NormFloat64() / 3
	}
	d.gain = clamp(1+0.04*r.NormFloat64(), 0.9, 1.1)
	d.contrast = clamp(0.015*r.NormFloat64(), -0.04, 0.04)
	return d
}

// blob is a deformed ellipsoid: a deep structure of one morph.
type blob struct {
	tissue     Tissue
	c          [3]float64 // centre (mm, standard head)
	inv        [3]float64 // reciprocal semi-axes in the structure's own frame
	cos, sin   float64    // pitch about x: the long axis tilts down towards the front
	bend       float64    // mm the ends drop below the middle (banana shape)
	pert       float64    // radial perturbation amplitude (relative)
	lo, hi     [3]float64 // bounding box
	mtl        bool       // medial temporal structure (mask code)
	ventricles bool
}

func newBlob(t Tissue, c, axes [3]float64, pitchDeg, bend, pert float64) blob {
	th := pitchDeg * math.Pi / 180
	b := blob{tissue: t, c: c, cos: math.Cos(th), sin: math.Sin(th), bend: bend, pert: pert}
	m := 0.0
	for i := range axes {
		b.inv[i] = 1 / axes[i]
		m = math.Max(m, axes[i])
	}
	ext := m*(1+pert) + math.Abs(bend) + 0.5
	for i := range c {
		b.lo[i], b.hi[i] = c[i]-ext, c[i]+ext
	}
	b.lo[0], b.hi[0] = c[0]-axes[0]*(1+pert)-0.5, c[0]+axes[0]*(1+pert)+0.5
	return b
}

// inside reports whether p lies in the blob; low is the smooth field there.
func (b *blob) inside(p [3]float64, low float64) bool {
	for i := 0; i < 3; i++ {
		if p[i] < b.lo[i] || p[i] > b.hi[i] {
			return false
		}
	}
	ux, uy, uz := p[0]-b.c[0], p[1]-b.c[1], p[2]-b.c[2]
	uy, uz = b.cos*uy-b.sin*uz, b.sin*uy+b.cos*uz
	ey := uy * b.inv[1]
	uz -= b.bend * (1 - ey*ey)
	ex, ez := ux*b.inv[0], uz*b.inv[2]
	r2 := ex*ex + ey*ey + ez*ez
	hi, lo := 1+b.pert, 1-b.pert
	if r2 >= hi*hi {
		return false
	}
	if r2 <= lo*lo {
		return true
	}
	return math.Sqrt(r2)+b.pert*low < 1
}

// morph is the anatomy at one pattern severity: the deep structures and the
// cortical parameters. Each case has a base morph (age effects only) and
// the actual one (age and pattern); the mask is where they differ.
type morph struct {
	blobs        []blob
	lo, hi       [3]float64 // bounding box of all blobs
	cells        [][]int32  // blob indices whose boxes meet each cell, in precedence order
	ncell        [3]int
	pial         float64 // global inward shift of the pial surface (mm)
	pialPattern  float64 // extra shift at the peak of the pattern region (mm)
	sulcW        float64 // sulcal width as a fraction of the folding field's s.d.
	sulcWPattern float64
	fissW        float64 // half width of the interhemispheric fissure (mm)
}

// Ageing and pattern effect sizes. The ageing rates are of the order reported
// for adults over 55 (ventricles roughly doubling in volume over 30 years,
// hippocampal loss of a few tenths of a percent a year, cortical thinning
// of about 0.01 mm a year; figures from memory, used only to shape the
// phantom); the pattern sizes are chosen so that mild cases overlap with
// normal ageing.
const (
	ventAgeXZ, ventAgeY   = 0.010, 0.004 // relative growth per year
	ventPatXZ, ventPatY   = 0.80, 0.15   // relative growth at severity 1
	mtlAge, mtlPat        = 0.002, 0.18  // relative linear shrinkage per year, at severity 1
	pialAge, pialPat      = 0.008, 1.2   // mm per year, mm at severity 1
	sulcW0, sulcWAge      = 0.20, 0.004
	sulcWPat              = 0.15
	gapAge                = 0.015 // mm per year of extra subarachnoid CSF
	fissW0, fissWAge      = 1.2, 0.02
	fissDepth             = 30.0
	regionRadius          = 34.0
	brainShapeAmp         = 0.03
	minCorticalThicknessM = 0.8
)

// patternRegions are the centres (mm, standard head) of the bilateral
// temporal and parietal regions where the pattern thins the cortex.
var patternRegions = [4][3]float64{{48, -12, -18}, {-48, -12, -18}, {34, -44, 30}, {-34, -44, 30}}

// anatomy is a subject's head, ready to classify points.
type anatomy struct {
	rot      [3][3]float64 // world = trans + scale·rot·p for a point p of the standard head
	trans    [3]float64
	scale    float64
	ax, ay   float64
	azS, azI float64
	taper    float64
	bound    [3]float64 // semi-axes of an ellipsoid containing the brain hull
	head     [3]float64 // semi-axes of an ellipsoid containing the head
	layers   [5]float64 // cumulative outer boundaries beyond the brain hull (mm)
	thick    float64
	sulcus   float64
	foldK    float64 // r.m.s. wavenumber of the folding field (radians/mm)
	d        *shapeDraw
	base     morph
	actual   morph
	positive bool
}

func newAnatomy(s *Subject) *anatomy {
	d := &s.draw
	a := &anatomy{d: d, scale: s.HeadScale, trans: d.trans, taper: d.taper,
		ax: d.axes[0], ay: d.axes[1], azS: d.axes[2], azI: d.axes[3],
		thick: d.thickness, sulcus: d.sulcusDepth, positive: s.Severity > 0}
	a.rot = rotation(d.angles)
	a.foldK = d.fold.rmsK()
	years := math.Max(0, s.Age-55)
	acc := 0.0
	for i, l := range d.layers {
		if i == 0 {
			l += gapAge * years
		}
		acc += l
		a.layers[i] = acc
	}
	f := 1 + brainShapeAmp*3.2
	a.bound = [3]float64{a.ax*(1+math.Abs(a.taper))*f + 1, a.ay*f + 1, math.Max(a.azS, a.azI)*f + 1}
	for i := range a.head {
		a.head[i] = a.bound[i] + a.layers[4] + 1
	}
	a.base = a.newMorph(years, 0)
	a.actual = a.newMorph(years, s.Severity)
	if a.positive {
		a.actual.keepVentricles(&a.base)
	}
	return a
}

// keepVentricles makes m's ventricles contain base's: a widening ventricle
// whose centre moves sideways must not uncover tissue on its medial side.
func (m *morph) keepVentricles(base *morph) {
	n := 0
	for n < len(m.blobs) && m.blobs[n].ventricles {
		n++
	}
	var bs []blob
	bs = append(bs, m.blobs[:n]...)
	for _, b := range base.blobs {
		if b.ventricles {
			bs = append(bs, b)
		}
	}
	m.blobs = append(bs, m.blobs[n:]...)
	m.setBox()
}

// rotation is Rz·Ry·Rx of the angles.
func rotation(ang [3]float64) [3][3]float64 {
	sx, cx := math.Sincos(ang[0])
	sy, cy := math.Sincos(ang[1])
	sz, cz := math.Sincos(ang[2])
	rx := [3][3]float64{{1, 0, 0}, {0, cx, -sx}, {0, sx, cx}}
	ry := [3][3]float64{{cy, 0, sy}, {0, 1, 0}, {-sy, 0, cy}}
	rz := [3][3]float64{{cz, -sz, 0}, {sz, cz, 0}, {0, 0, 1}}
	return mat3Mul(rz, mat3Mul(ry, rx))
}

func mat3Mul(a, b [3][3]float64) [3][3]float64 {
	var c [3][3]float64
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			for k := 0; k < 3; k++ {
				c[i][j] += a[i][k] * b[k][j]
			}
		}
	}
	return c
}

// toStandard maps a world point (mm) to the standard head frame.
func (a *anatomy) toStandard(w [3]float64) [3]float64 {
	u := [3]float64{w[0] - a.trans[0], w[1] - a.trans[1], w[2] - a.trans[2]}
	var p [3]float64
	for i := 0; i < 3; i++ {
		p[i] = (a.rot[0][i]*u[0] + a.rot[1][i]*u[1] + a.rot[2][i]*u[2]) / a.scale
	}
	return p
}

// toStandardDir maps a world displacement to the standard head frame.
func (a *anatomy) toStandardDir(w [3]float64) [3]float64 {
	var p [3]float64
	for i := 0; i < 3; i++ {
		p[i] = (a.rot[0][i]*w[0] + a.rot[1][i]*w[1] + a.rot[2][i]*w[2]) / a.scale
	}
	return p
}

func (a *anatomy) newMorph(years, sev float64) morph {
	d := a.d
	vxz := (1 + ventAgeXZ*years) * (1 + ventPatXZ*sev) * d.ventSize
	vy := (1 + ventAgeY*years) * (1 + ventPatY*sev) * math.Sqrt(d.ventSize)
	mtl := (1 - mtlAge*years) * (1 - mtlPat*sev) * d.mtlSize
	young := d.mtlSize
	j := func(n int, c [3]float64) [3]float64 {
		return [3]float64{c[0] + d.jitter[n][0], c[1] + d.jitter[n][1], c[2] + d.jitter[n][2]}
	}
	var bs []blob
	add := func(b blob, mtlFlag, vent bool) {
		b.mtl, b.ventricles = mtlFlag, vent
		bs = append(bs, b)
	}
	for _, s := range []float64{1, -1} {
		lvx := 4.5 * vxz
		c := j(0, [3]float64{0, 0, 12})
		c[0] = s * (1.5 + lvx) // the septum stays in the midline
		add(newBlob(Ventricle, c, [3]float64{lvx, 25 * vy, 6 * vxz}, 0, -7, 0.12), false, true)
	}
	add(newBlob(Ventricle, j(1, [3]float64{0, -6, 0}), [3]float64{1.2 * vxz, 11 * vy, 7 * vxz}, 0, 0, 0.1), false, true)
	for n, s := range []float64{1, -1} {
		add(newBlob(Ventricle, j(2+n, [3]float64{s * 31, -14, -14}), [3]float64{1.2 * vxz, 13 * vy, 1.8 * vxz}, 25, 0, 0.15), false, true)
	}
	mtlBlobs := func(scale float64, hip, amy Tissue) {
		for n, s := range []float64{1, -1} {
			add(newBlob(hip, j(4+n, [3]float64{s * 27, -16, -19}), [3]float64{4.5 * scale, 16 * scale, 5.5 * scale}, 28, 0, 0.1), true, false)
			add(newBlob(amy, j(4+n, [3]float64{s * 23, 5, -25}), [3]float64{6 * scale, 6.5 * scale, 5.5 * scale}, 0, 0, 0.1), true, false)
		}
	}
	mtlBlobs(mtl, Hippocampus, Amygdala)
	// The space the medial temporal structures had at full size fills with
	// CSF as they shrink (temporal horn and choroidal fissure widening).
	mtlBlobs(young, Ventricle, Ventricle)
	for n, s := range []float64{1, -1} {
		add(newBlob(DeepGM, j(6+n, [3]float64{s * 9.5, -10, 2}), [3]float64{6.5, 11, 7}, 0, 0, 0.08), false, false)
		add(newBlob(DeepGM, j(6+n, [3]float64{s * 21, 3, -1}), [3]float64{5.5, 12, 8}, 0, 0, 0.08), false, false)
		add(newBlob(DeepGM, j(6+n, [3]float64{s * 15.5, 11, 10}), [3]float64{3.5, 9, 6}, 0, 0, 0.08), false, false)
	}
	m := morph{blobs: bs,
		pial: pialAge * years, pialPattern: pialPat * sev,
		sulcW: sulcW0 + sulcWAge*years, sulcWPattern: sulcWPat * sev,
		fissW: fissW0 + fissWAge*years}
	m.setBox()
	return m
}

// inBox reports whether p is in the bounding box of the blobs.
func (m *morph) inBox(p [3]float64) bool {
	return p[0] >= m.lo[0] && p[0] <= m.hi[0] && p[1] >= m.lo[1] && p[1] <= m.hi[1] && p[2] >= m.lo[2] && p[2] <= m.hi[2]
}

// cellMM is the edge of the cells that index the blobs.
const cellMM = 6.0

// setBox sets the bounding box of all blobs and the cell index that lists,
// for each cell of the box, the blobs whose boxes meet it.
func (m *morph) setBox() {
	m.lo, m.hi = m.blobs[0].lo, m.blobs[0].hi
	for _, b := range m.blobs[1:] {
		for i := 0; i < 3; i++ {
			m.lo[i] = math.Min(m.lo[i], b.lo[i])
			m.hi[i] = math.Max(m.hi[i], b.hi[i])
		}
	}
	for i := range m.ncell {
		m.ncell[i] = int((m.hi[i]-m.lo[i])/cellMM) + 1
	}
	m.cells = make([][]int32, m.ncell[0]*m.ncell[1]*m.ncell[2])
	for n, b := range m.blobs {
		var c0, c1 [3]int
		for i := range c0 {
			c0[i] = int((b.lo[i] - m.lo[i]) / cellMM)
			c1[i] = min(int((b.hi[i]-m.lo[i])/cellMM), m.ncell[i]-1)
		}
		for z := c0[2]; z <= c1[2]; z++ {
			for y := c0[1]; y <= c1[1]; y++ {
				for x := c0[0]; x <= c1[0]; x++ {
					c := x + m.ncell[0]*(y+m.ncell[1]*z)
					m.cells[c] = append(m.cells[c], int32(n))
				}
			}
		}
	}
}

// candidates returns the blobs that may contain p, in precedence order.
func (m *morph) candidates(p [3]float64) []int32 {
	if !m.inBox(p) {
		return nil
	}
	var c [3]int
	for i := range c {
		c[i] = min(int((p[i]-m.lo[i])/cellMM), m.ncell[i]-1)
	}
	return m.cells[c[0]+m.ncell[0]*(c[1]+m.ncell[1]*c[2])]
}

// fieldVals are the smooth fields at one point.
type fieldVals struct{ fold, low, shape float64 }

// depth is the radial depth of p below the (deformed) brain hull: positive
// inside, negative outside.
func (a *anatomy) depth(p [3]float64, shape float64) float64 {
	x, y, z := p[0], p[1], p[2]
	ax := a.ax * (1 + a.taper*y/a.ay)
	az := a.azS
	if z < 0 {
		az = a.azI
	}
	qx, qy, qz := x/ax, y/a.ay, z/az
	q := math.Sqrt(qx*qx + qy*qy + qz*qz)
	if q < 1e-9 {
		return math.Inf(1)
	}
	rho := math.Sqrt(x*x + y*y + z*z)
	return rho/q*(1+brainShapeAmp*shape) - rho
}

// outer classifies a point e mm outside the brain hull.
func (a *anatomy) outer(p [3]float64, e float64) Tissue {
	switch {
	case e < a.layers[0]:
		return CSF
	case e < a.layers[1]:
		return Bone
	case e < a.layers[2]:
		return Marrow
	case e < a.layers[3]:
		return Bone
	case e < a.layers[4]:
		return Scalp
	}
	return a.neck(p)
}

// neck is the soft tissue below the skull, or air.
func (a *anatomy) neck(p [3]float64) Tissue {
	if p[2] < -25 {
		nx, ny := p[0]/38, (p[1]+8)/42
		if nx*nx+ny*ny < 1 {
			return Neck
		}
	}
	return Air
}

// region is the weight in [0, 1] of the pattern's cortical thinning at p.
func region(p [3]float64) float64 {
	w := 0.0
	for _, c := range patternRegions {
		dx, dy, dz := p[0]-c[0], p[1]-c[1], p[2]-c[2]
		u := 1 - (dx*dx+dy*dy+dz*dz)/(regionRadius*regionRadius)
		if u > 0 && u*u > w {
			w = u * u
		}
	}
	return w
}

// inner classifies a point at depth d ≥ 0 inside the brain hull.
func (a *anatomy) inner(m *morph, p [3]float64, d float64, f *fieldVals, reg float64) Tissue {
	for _, i := range m.candidates(p) {
		if m.blobs[i].inside(p, f.low) {
			return m.blobs[i].tissue
		}
	}
	// The pial surface is a height field over the hull: narrow V-shaped
	// sulci along the zero set of the folding field. The white-matter
	// surface lies one cortical thickness below it; on the steep sulcal walls
	// that offset is horizontal, which in folding-field units is the
	// thickness times the field's r.m.s. wavenumber.
	th := a.thick * (1 + 0.1*f.low)
	w := m.sulcW + m.sulcWPattern*reg
	ww := w + th*a.foldK
	depth := a.sulcus * (1 + 0.25*f.low)
	af := math.Abs(f.fold)
	s, sw := 0.0, 0.0
	if af < w {
		s = depth * (1 - af/w)
	}
	if af < ww {
		sw = depth * (1 - af/ww)
	}
	ax := math.Abs(p[0])
	if fs := fissDepth * (1 - ax/m.fissW); fs > s {
		s = fs
	}
	if fs := fissDepth * (1 - ax/(m.fissW+th)); fs > sw {
		sw = fs
	}
	wm := sw + th
	pial := s + m.pial + m.pialPattern*reg
	if lim := wm - minCorticalThicknessM; pial > lim {
		pial = lim
	}
	switch {
	case d < pial:
		return CSF
	case d < wm:
		return GM
	}
	return WM
}

// classify returns the tissue at p and the mask code of the pattern's change there.
func (a *anatomy) classify(p [3]float64, f *fieldVals) (Tissue, uint8) {
	d := a.depth(p, f.shape)
	if d < 0 {
		return a.outer(p, -d), MaskNone
	}
	reg := 0.0
	if a.positive && d < 30 {
		reg = region(p)
	}
	t := a.inner(&a.actual, p, d, f, reg)
	// The pattern acts only on the deep structures and, through reg, on the
	// cortex of its regions: elsewhere the base anatomy is the actual one.
	if !a.positive || (reg == 0 && !a.actual.inBox(p)) {
		return t, MaskNone
	}
	tb := a.inner(&a.base, p, d, f, reg)
	if t == tb {
		return t, MaskNone
	}
	return t, maskCode(t, tb)
}

func maskCode(t, tb Tissue) uint8 {
	switch {
	case t == Hippocampus || t == Amygdala || tb == Hippocampus || tb == Amygdala:
		return MaskMedialTemporal
	case t == Ventricle || tb == Ventricle:
		return MaskVentricles
	}
	return MaskCortex
}
