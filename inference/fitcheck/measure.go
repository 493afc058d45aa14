package fitcheck

import (
	"math"

	"brightfold/internal/stats"
	"brightfold/internal/volume"
)

// Hounsfield-unit windows of the CT signature: air is −1000 HU and cortical
// bone several hundred to a few thousand HU (the Hounsfield scale fixes water
// at 0 and air at −1000; bone ranges from memory, common radiology practice).
const (
	huAirLow, huAirHigh   = -1100.0, -900.0
	huBoneLow, huBoneHigh = 300.0, 3000.0
)

// maxSample bounds the voxels a measurement visits; larger volumes are
// visited with a fixed stride (whole rows for NoiseRatio), so results are
// deterministic.
const maxSample = 1 << 20

// HUSignature returns the fraction of finite voxels within 100 of −1000 (air
// in Hounsfield units) and the fraction of the remaining finite voxels in
// [+300, +3000] (bone). A magnitude MR image has neither; a CT in Hounsfield
// units has both, whatever its header says.
func HUSignature(data []float32) (air, bone float64) {
	stride := 1 + len(data)/maxSample
	var n, na, nb float64
	for i := 0; i < len(data); i += stride {
		x := float64(data[i])
		if math.IsNaN(x) || math.IsInf(x, 0) {
			continue
		}
		n++
		switch {
		case x >= huAirLow && x <= huAirHigh:
			na++
		case x >= huBoneLow && x <= huBoneHigh:
			nb++
		}
	}
	if n == 0 {
		return 0, 0
	}
	if n > na {
		bone = nb / (n - na)
	}
	return na / n, bone
}

// NoiseRatio estimates image noise relative to head contrast: the robust
// standard deviation of differences between neighbours along the first voxel
// axis where both are head (1.4826 · MAD / √2, the MAD scale factor for a
// normal distribution; the √2 because a difference of two independent noisy
// voxels has twice the variance), divided by the interquartile range of the
// head voxels. Rows are visited with a fixed stride on large volumes. It
// returns NaN when the head has too few voxels.
func NoiseRatio(v *volume.Volume, threshold float64) float64 {
	rows := v.Dims[1] * v.Dims[2]
	stride := 1 + v.Len()/(maxSample/4)
	var diffs, head []float64
	for r := 0; r < rows; r += stride {
		j, k := r%v.Dims[1], r/v.Dims[1]
		o := v.Index(0, j, k)
		row := v.Data[o : o+v.Dims[0]]
		for i, x := range row {
			if !(float64(x) > threshold) {
				continue
			}
			head = append(head, float64(x))
			if i+1 < len(row) && float64(row[i+1]) > threshold {
				diffs = append(diffs, float64(row[i+1])-float64(x))
			}
		}
	}
	if len(diffs) < 16 || len(head) < 16 {
		return math.NaN()
	}
	iqr := stats.SelectQuantile(head, 0.75) - stats.SelectQuantile(head, 0.25)
	if !(iqr > 0) {
		return math.NaN()
	}
	return robustSD(diffs) / math.Sqrt2 / iqr
}

// robustSD is 1.4826 · median(|x − median(x)|); it reorders x.
func robustSD(x []float64) float64 {
	med := stats.SelectQuantile(x, 0.5)
	for i, v := range x {
		x[i] = math.Abs(v - med)
	}
	return 1.4826 * stats.SelectQuantile(x, 0.5)
}

// ObliquityDeg is the largest angle, over the three voxel axes, between an
// axis and the world axis it is closest to.
func ObliquityDeg(a volume.Affine) float64 {
	worst := 0.0
	for c := 0; c < 3; c++ {
		norm := math.Sqrt(a[0][c]*a[0][c] + a[1][c]*a[1][c] + a[2][c]*a[2][c])
		if norm == 0 {
			return 90
		}
		best := 0.0
		for r := 0; r < 3; r++ {
			best = math.Max(best, math.Abs(a[r][c])/norm)
		}
		worst = math.Max(worst, math.Acos(math.Min(1, best))*180/math.Pi)
	}
	return worst
}

// FOVMm returns the scan's extent along the world R, A, S axes: for each
// world axis, the extent (voxel count × spacing) of the voxel axis closest to
// it (volume.ClosestAxes). An affine without clear axes gives zeros.
func FOVMm(v *volume.Volume) [3]float64 {
	var out [3]float64
	m, err := volume.ClosestAxes(v.Affine)
	if err != nil {
		return out
	}
	sp := v.Spacing()
	for ax := 0; ax < 3; ax++ {
		out[m.World[ax]] = float64(v.Dims[ax]) * sp[ax]
	}
	return out
}
