package viewer

import (
	"errors"
	"fmt"
	"math"

	"brightfold/internal/volume"
)

// OverlayMap is a scalar map on the scan's voxel grid (a relevance map, for
// instance, already resampled onto the scan by its producer), with the
// distribution of its magnitudes for percentile thresholds. It does not
// change after NewOverlayMap and is safe for concurrent use.
type OverlayMap struct {
	data    []float32
	units   string
	mags    distribution // |value| of the finite non-zero voxels
	signed  bool         // some finite value is negative
	maxAbs  float64
	nonzero int
}

// NewOverlayMap checks that m lies on the same grid as the scene (same dims;
// affine equal within 1e-3 mm) and prepares it; units label the colour bar
// (e.g. "relevance (a.u.)").
func NewOverlayMap(s *Scene, m *volume.Volume, units string) (*OverlayMap, error) {
	if m == nil {
		return nil, errors.New("viewer: no overlay map")
	}
	if m.Dims != s.vol.Dims || len(m.Data) != len(s.vol.Data) {
		return nil, fmt.Errorf("viewer: overlay grid %v does not match the scan grid %v", m.Dims, s.vol.Dims)
	}
	for r := 0; r < 3; r++ {
		for c := 0; c < 4; c++ {
			if d := math.Abs(m.Affine[r][c] - s.vol.Affine[r][c]); !(d <= 1e-3) {
				return nil, fmt.Errorf("viewer: overlay affine differs from the scan's at [%d][%d] by %g", r, c, d)
			}
		}
	}
	o := &OverlayMap{data: m.Data, units: units, mags: newDistribution(m.Data, true)}
	o.maxAbs = o.mags.max()
	if o.mags.empty() {
		o.maxAbs = 0
	}
	for _, x := range m.Data {
		if x < 0 {
			o.signed = true
		}
		if x != 0 && x == x && !math.IsInf(float64(x), 0) {
			o.nonzero++
		}
	}
	return o, nil
}

// Units labels the map's values.
func (o *OverlayMap) Units() string { return o.units }

// MaxAbs is the largest finite |value| (0 for an all-zero map).
func (o *OverlayMap) MaxAbs() float64 { return o.maxAbs }

// HasNegative reports whether the map has negative values (a signed map).
func (o *OverlayMap) HasNegative() bool { return o.signed }

// Data returns the map's voxel values (not to be modified).
func (o *OverlayMap) Data() []float32 { return o.data }

// Threshold hides overlay values whose magnitude does not exceed it: either
// an absolute value (in the map's units) or a percentile (0..100) of the
// magnitudes |v| of the map's finite non-zero voxels.
type Threshold struct {
	Value      float64
	Percentile bool
}

// Resolve returns the threshold as an absolute magnitude for map o.
func (o *OverlayMap) Resolve(t Threshold) float64 {
	if !t.Percentile {
		return math.Abs(t.Value)
	}
	if o.mags.empty() {
		return 0
	}
	return o.mags.percentile(t.Value)
}

// VisibleShare returns the percentage of the map's non-zero voxels whose
// magnitude exceeds the absolute threshold thr (for a readout beside the
// threshold control).
func (o *OverlayMap) VisibleShare(thr float64) float64 {
	if o.mags.empty() {
		return 0
	}
	return 100 - o.mags.rank(thr)
}

// OverlayStyle says how an overlay map is drawn over the scan.
type OverlayStyle struct {
	// Colormap: nil picks Ember for positive-only and Tide for signed display.
	Colormap *Colormap
	// Opacity of the overlay colour over the grey scan, 0..1.
	Opacity float64
	// Threshold: values with |v| at or below it are not drawn.
	Threshold Threshold
	// Signed draws negative and positive values with a diverging map
	// (neutral at zero), its opacity growing with |value| so that values
	// near zero fade out; otherwise only positive values are drawn, with a
	// sequential map, and negative ones are hidden.
	Signed bool
	// Range is the |value| at the colour map's ends (values beyond saturate);
	// 0 means the map's largest |value|.
	Range float64
}

// overlayPaint is an OverlayStyle resolved against one map.
type overlayPaint struct {
	cm       *Colormap
	alpha    int // 0..256
	thr, rng float64
	signed   bool
	last     float64 // len(table)-1
	mid      int     // centre entry of a diverging table
}

func (st OverlayStyle) resolve(o *OverlayMap) (overlayPaint, error) {
	cm := st.Colormap
	if cm == nil {
		cm = Ember()
		if st.Signed {
			cm = Tide()
		}
	}
	if cm.Diverging() != st.Signed {
		return overlayPaint{}, fmt.Errorf("viewer: colour map %q is for %s values", cm.Name(), map[bool]string{true: "signed", false: "positive"}[cm.Diverging()])
	}
	p := overlayPaint{cm: cm, signed: st.Signed, thr: o.Resolve(st.Threshold), rng: st.Range}
	if !(p.rng > 0) || math.IsInf(p.rng, 0) {
		p.rng = o.maxAbs
	}
	if !(p.rng > 0) {
		p.rng = 1
	}
	op := st.Opacity
	if math.IsNaN(op) {
		op = 0
	}
	p.alpha = int(math.Max(0, math.Min(1, op))*256 + 0.5)
	p.last = float64(cm.Len() - 1)
	p.mid = (cm.Len() - 1) / 2
	return p, nil
}

// alphaFor is the opacity (0..256) of colour-table entry i: the style's
// opacity for a sequential map; for a diverging map it grows linearly with
// the distance from the neutral centre, so values near zero fade out
// instead of laying a pale veil over the scan.
func (p *overlayPaint) alphaFor(i int) int {
	if !p.signed || p.mid == 0 {
		return p.alpha
	}
	k := i - p.mid
	if k < 0 {
		k = -k
	}
	return p.alpha * k / p.mid
}

// entry returns the colour-table index for value v and whether v is drawn.
func (p *overlayPaint) entry(v float32) (int, bool) {
	f := float64(v)
	if p.signed {
		a := math.Abs(f)
		if !(a > p.thr) || a == 0 || math.IsInf(a, 0) {
			return 0, false
		}
		// Symmetric rounding about the neutral centre, so v and -v get mirrored entries.
		k := int(math.Min(1, a/p.rng)*float64(p.mid) + 0.5)
		if f < 0 {
			return p.mid - k, true
		}
		return p.mid + k, true
	}
	if !(f > p.thr) || f <= 0 || math.IsInf(f, 0) {
		return 0, false
	}
	return int(math.Min(1, f/p.rng)*p.last + 0.5), true
}

// TopShare is the percentage of the map's non-zero voxels whose magnitude
// is at least |v|: 1 means v is among the strongest 1 % of the map. It
// lets a reader judge a relevance value without knowing the map's units.
// NaN for a zero value or an empty map.
func (o *OverlayMap) TopShare(v float64) float64 {
	if v == 0 || o.mags.empty() || math.IsNaN(v) {
		return math.NaN()
	}
	return 100 - o.mags.rank(math.Abs(v)) + 100/float64(len(o.mags.sorted))
}
