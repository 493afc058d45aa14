package viewer

import (
	"fmt"
	"math"

	"brightfold/internal/volume"
)

// Plane is one of the three display planes.
type Plane int

// The display planes, named by the world axis they are perpendicular to.
const (
	Axial    Plane = iota // perpendicular to S-I
	Coronal               // perpendicular to A-P
	Sagittal              // perpendicular to R-L
)

// Planes lists the three planes in display order.
func Planes() [3]Plane { return [3]Plane{Axial, Coronal, Sagittal} }

// String is the plane's name in lower case.
func (p Plane) String() string {
	switch p {
	case Axial:
		return "axial"
	case Coronal:
		return "coronal"
	case Sagittal:
		return "sagittal"
	}
	return fmt.Sprintf("plane(%d)", int(p))
}

// Convention is the left-right display convention of axial and coronal planes.
type Convention int

const (
	// Radiological shows the patient's right on the image left (the default).
	Radiological Convention = iota
	// Neurological shows the patient's right on the image right.
	Neurological
)

// String describes the convention.
func (c Convention) String() string {
	if c == Neurological {
		return "neurological (patient R on image right)"
	}
	return "radiological (patient R on image left)"
}

// planeLayout says which world axes run across and down a plane, and which
// way: colDir (rowDir) is +1 when the world coordinate grows as the pixel
// column (row) grows.
type planeLayout struct {
	slice, col, row int
	colDir, rowDir  float64
}

func (p Plane) layout() planeLayout {
	switch p {
	case Coronal:
		return planeLayout{slice: 1, col: 0, row: 2, colDir: -1, rowDir: -1}
	case Sagittal:
		return planeLayout{slice: 0, col: 1, row: 2, colDir: -1, rowDir: -1}
	}
	return planeLayout{slice: 2, col: 0, row: 1, colDir: -1, rowDir: -1}
}

// MaxSide bounds the width and height of a Frame in pixels; a finer pixel
// size that would exceed it is coarsened.
const MaxSide = 4096

// Frame is the geometry of one rendered plane: the voxel slice shown and how
// image pixels map to voxels. Build it with Scene.Frame; it is a small value,
// cheap to copy and safe to share.
type Frame struct {
	Plane      Plane
	Convention Convention
	Width      int     // image width in pixels
	Height     int     // image height in pixels
	PixelMM    float64 // side of one (square) image pixel in millimetres
	Slice      int     // voxel index along the slice axis

	offX, offY       float64 // where this image starts in the whole plane, in pixels (Viewport)
	col, row, slice  axisRef // voxel axes across, down and through the image
	colFlip, rowFlip bool
	dims             [3]int
	spacing          [3]float64
	affine, inv      volume.Affine
}

// DefaultPixelMM is the pixel size Frame uses when asked for none: the
// smallest voxel spacing, so that no plane loses resolution and all share a scale.
func (s *Scene) DefaultPixelMM() float64 {
	return math.Min(s.spacing[0], math.Min(s.spacing[1], s.spacing[2]))
}

// Frame returns the geometry of plane pl through the RAS point at (the slice
// nearest to it), in convention c, with pixels of pixelMM millimetres
// (DefaultPixelMM when pixelMM is not positive; coarsened so that no side
// exceeds MaxSide).
func (s *Scene) Frame(pl Plane, at [3]float64, c Convention, pixelMM float64) Frame {
	lay := pl.layout()
	if c == Neurological && pl != Sagittal {
		lay.colDir = -lay.colDir
	}
	f := Frame{
		Plane: pl, Convention: c,
		col: s.world[lay.col], row: s.world[lay.row], slice: s.world[lay.slice],
		dims: s.vol.Dims, spacing: s.spacing, affine: s.vol.Affine, inv: s.inv,
	}
	f.colFlip = f.col.positive != (lay.colDir > 0)
	f.rowFlip = f.row.positive != (lay.rowDir > 0)
	if !(pixelMM > 0) || math.IsInf(pixelMM, 0) {
		pixelMM = s.DefaultPixelMM()
	}
	colMM := float64(f.dims[f.col.voxel]) * f.spacing[f.col.voxel]
	rowMM := float64(f.dims[f.row.voxel]) * f.spacing[f.row.voxel]
	pixelMM = math.Max(pixelMM, math.Max(colMM, rowMM)/MaxSide)
	f.PixelMM = pixelMM
	f.Width = sideLength(colMM, pixelMM)
	f.Height = sideLength(rowMM, pixelMM)
	ijk, _ := s.NearestVoxel(at)
	f.Slice = ijk[f.slice.voxel]
	return f
}

// sideLength is the number of pixels of size px that cover mm millimetres.
func sideLength(mm, px float64) int {
	n := int(math.Ceil(mm/px - 1e-9))
	return clampInt(n, 1, MaxSide)
}

// Viewport returns the part of f's plane that an image of w × h pixels shows
// when its centre is on the RAS point centre (projected onto the plane): for
// a screen of fixed size, pan by moving centre and zoom by building f with
// another pixel size. Pixels beyond the volume render black.
func (f Frame) Viewport(centre [3]float64, w, h int) Frame {
	x, y := f.WorldToPixel(centre)
	w, h = clampInt(w, 1, MaxSide), clampInt(h, 1, MaxSide)
	v := f
	v.offX, v.offY = f.offX+x-float64(w)/2, f.offY+y-float64(h)/2
	if math.IsNaN(v.offX) || math.IsInf(v.offX, 0) || math.IsNaN(v.offY) || math.IsInf(v.offY, 0) {
		v.offX, v.offY = f.offX, f.offY
	}
	v.Width, v.Height = w, h
	return v
}

// SliceAxis returns the voxel axis (0, 1 or 2) the frame's slice index counts along.
func (f Frame) SliceAxis() int { return f.slice.voxel }

// axisCoord maps a continuous pixel coordinate along one image side to a
// continuous voxel index along axis a (flipped when the index runs against
// the image direction).
func (f Frame) axisCoord(pix float64, a int, flip bool) float64 {
	t := pix*f.PixelMM/f.spacing[a] - 0.5
	if flip {
		return float64(f.dims[a]-1) - t
	}
	return t
}

// pixelCoord is the inverse of axisCoord.
func (f Frame) pixelCoord(idx float64, a int, flip bool) float64 {
	if flip {
		idx = float64(f.dims[a]-1) - idx
	}
	return (idx + 0.5) * f.spacing[a] / f.PixelMM
}

// PixelToVoxel maps the continuous pixel position (x, y) to a continuous voxel
// index on the frame's slice.
func (f Frame) PixelToVoxel(x, y float64) [3]float64 {
	var ijk [3]float64
	ijk[f.col.voxel] = f.axisCoord(x+f.offX, f.col.voxel, f.colFlip)
	ijk[f.row.voxel] = f.axisCoord(y+f.offY, f.row.voxel, f.rowFlip)
	ijk[f.slice.voxel] = float64(f.Slice)
	return ijk
}

// VoxelToPixel maps a continuous voxel index to the pixel position where it
// appears (its component along the slice axis is ignored).
func (f Frame) VoxelToPixel(ijk [3]float64) (x, y float64) {
	return f.pixelCoord(ijk[f.col.voxel], f.col.voxel, f.colFlip) - f.offX,
		f.pixelCoord(ijk[f.row.voxel], f.row.voxel, f.rowFlip) - f.offY
}

// PixelToWorld maps the continuous pixel position (x, y) to RAS millimetres
// on the frame's slice.
func (f Frame) PixelToWorld(x, y float64) [3]float64 { return f.affine.Apply(f.PixelToVoxel(x, y)) }

// WorldToPixel maps a RAS point to the pixel position of its projection onto
// the frame's plane.
func (f Frame) WorldToPixel(p [3]float64) (x, y float64) { return f.VoxelToPixel(f.inv.Apply(p)) }

// VoxelAt returns the voxel that nearest-neighbour display shows at the
// continuous pixel position (x, y) (rounded in display order, like the
// rendering) and whether the position falls on the volume.
func (f Frame) VoxelAt(x, y float64) ([3]int, bool) {
	var ijk [3]int
	in := true
	for _, side := range [2]struct {
		pix  float64
		a    int
		flip bool
	}{{x + f.offX, f.col.voxel, f.colFlip}, {y + f.offY, f.row.voxel, f.rowFlip}} {
		d := f.axisCoord(side.pix, side.a, false)
		last := f.dims[side.a] - 1
		if !(d >= -0.5 && d < float64(last)+0.5) {
			in = false
		}
		i := clampInt(roundHalfUp(d), 0, last)
		if side.flip {
			i = last - i
		}
		ijk[side.a] = i
	}
	ijk[f.slice.voxel] = f.Slice
	return ijk, in
}

// ContainsVoxel reports whether the continuous pixel position (x, y) falls on
// a voxel of the volume (pixels past the last voxel, when the image side is
// rounded up, do not).
func (f Frame) ContainsVoxel(x, y float64) bool {
	ijk := f.PixelToVoxel(x, y)
	for _, a := range [2]int{f.col.voxel, f.row.voxel} {
		if !(ijk[a] >= -0.5 && ijk[a] < float64(f.dims[a])-0.5) {
			return false
		}
	}
	return true
}

// Letters are the anatomical directions at the four edges of a frame, each
// one of R, L, A, P, S, I.
type Letters struct {
	Left, Right, Top, Bottom string
}

// Letters returns the direction each image edge points to, read from the
// affine: the right edge is where the pixel column grows, the bottom where
// the row grows.
func (f Frame) Letters() Letters {
	right := f.direction(f.col.voxel, f.colFlip)
	down := f.direction(f.row.voxel, f.rowFlip)
	return Letters{Left: opposite(right), Right: right, Top: opposite(down), Bottom: down}
}

// direction is the letter of the world direction voxel axis a points to
// (reversed when flip), by its largest RAS component.
func (f Frame) direction(a int, flip bool) string {
	best, sign := 0, 1.0
	for w := 0; w < 3; w++ {
		if math.Abs(f.affine[w][a]) > math.Abs(f.affine[best][a]) {
			best = w
		}
	}
	if f.affine[best][a] < 0 {
		sign = -1
	}
	if flip {
		sign = -sign
	}
	pos, neg := "RAS"[best:best+1], "LPI"[best:best+1]
	if sign > 0 {
		return pos
	}
	return neg
}

func opposite(l string) string {
	switch l {
	case "R":
		return "L"
	case "L":
		return "R"
	case "A":
		return "P"
	case "P":
		return "A"
	case "S":
		return "I"
	}
	return "S"
}
