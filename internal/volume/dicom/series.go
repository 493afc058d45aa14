package dicom

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"brightfold/internal/volume"
)

// SeriesInfo describes one image series found in DICOM input.
type SeriesInfo struct {
	// UID is the SeriesInstanceUID (0020,000E).
	UID string `json:"uid"`
	// Key selects this series in LoadOptions.SeriesUID: the UID, or the UID
	// with "/2", "/3", ... when one SeriesInstanceUID mixes orientations,
	// matrix sizes, pixel spacings or echo times and was split.
	Key         string `json:"key"`
	Number      int    `json:"number,omitempty"`
	Description string `json:"description,omitempty"`
	Modality    string `json:"modality,omitempty"`
	Slices      int    `json:"slices"` // images (frames) in the series
	// Volumes is the number of volumes the images form (every slice
	// position repeated that many times); 1 for an ordinary series.
	Volumes     int      `json:"volumes,omitempty"`
	Rows        int      `json:"rows"`
	Cols        int      `json:"cols"`
	Orientation string   `json:"orientation,omitempty"` // axis code of the assembled volume, e.g. "LPS"
	Plane       string   `json:"plane,omitempty"`       // axial, coronal, sagittal or oblique
	Files       []string `json:"files"`
	// Problem says why the series cannot be loaded, when that is known
	// from the headers.
	Problem string `json:"problem,omitempty"`
}

// dcmSeries is one group of frames that may become a volume.
type dcmSeries struct {
	info   SeriesInfo
	frames []dcmFrame
	broken []*dcmFile // files of this SeriesInstanceUID that cannot be used
	te     float64
}

// groupSeries sorts usable frames into series: by SeriesInstanceUID, then
// split by orientation, matrix size, pixel spacing and echo time.
func groupSeries(files []*dcmFile) []*dcmSeries {
	var out []*dcmSeries
	byUID := map[string][]*dcmSeries{}
	brokenByUID := map[string][]*dcmFile{}
	for _, f := range files {
		if f.err != nil {
			brokenByUID[f.seriesUID] = append(brokenByUID[f.seriesUID], f)
			continue
		}
		for _, fr := range f.frameGeo {
			s := findGroup(byUID[f.seriesUID], fr)
			if s == nil {
				s = &dcmSeries{te: f.echoTimeMs}
				s.info = SeriesInfo{UID: f.seriesUID, Number: f.seriesNumber, Description: f.meta.SeriesDescription,
					Modality: f.meta.Modality, Rows: f.rows, Cols: f.cols}
				byUID[f.seriesUID] = append(byUID[f.seriesUID], s)
				out = append(out, s)
			}
			s.frames = append(s.frames, fr)
		}
	}
	for uid, broken := range brokenByUID {
		groups := byUID[uid]
		if len(groups) == 0 {
			f := broken[0]
			s := &dcmSeries{info: SeriesInfo{UID: uid, Number: f.seriesNumber, Description: f.meta.SeriesDescription,
				Modality: f.meta.Modality, Rows: f.rows, Cols: f.cols}}
			groups = []*dcmSeries{s}
			byUID[uid] = groups
			out = append(out, s)
		}
		for _, s := range groups {
			s.broken = append(s.broken, broken...)
		}
	}
	finishSeries(out, byUID)
	return out
}

// findGroup returns the group of one SeriesInstanceUID that frame fr fits.
func findGroup(groups []*dcmSeries, fr dcmFrame) *dcmSeries {
	for _, s := range groups {
		ref := s.frames[0]
		if ref.file.rows != fr.file.rows || ref.file.cols != fr.file.cols ||
			!dcmCloseVec(ref.rowDir, fr.rowDir, 1e-3) || !dcmCloseVec(ref.colDir, fr.colDir, 1e-3) ||
			!dcmCloseRel(ref.pixelSpacing[0], fr.pixelSpacing[0], 1e-3) || !dcmCloseRel(ref.pixelSpacing[1], fr.pixelSpacing[1], 1e-3) ||
			math.Abs(s.te-fr.file.echoTimeMs) > 1e-3 {
			continue
		}
		return s
	}
	return nil
}

func dcmCloseVec(a, b pvec, tol float64) bool {
	return math.Abs(a[0]-b[0]) <= tol && math.Abs(a[1]-b[1]) <= tol && math.Abs(a[2]-b[2]) <= tol
}

func dcmCloseRel(a, b, tol float64) bool {
	return math.Abs(a-b) <= tol*math.Max(math.Abs(a), math.Abs(b))
}

// finishSeries orders the series, gives split ones their keys, and fills
// the listing fields.
func finishSeries(all []*dcmSeries, byUID map[string][]*dcmSeries) {
	for uid, groups := range byUID {
		for i, s := range groups {
			s.info.Key = uid
			if len(groups) > 1 {
				s.info.Key = uid + "/" + strconv.Itoa(i+1)
			}
		}
	}
	for _, s := range all {
		s.fillInfo()
	}
	sort.SliceStable(all, func(a, b int) bool {
		if all[a].info.Number != all[b].info.Number {
			return all[a].info.Number < all[b].info.Number
		}
		return all[a].info.Key < all[b].info.Key
	})
}

func (s *dcmSeries) fillInfo() {
	seen := map[string]bool{}
	add := func(p string) {
		if !seen[p] {
			seen[p] = true
			s.info.Files = append(s.info.Files, p)
		}
	}
	for _, fr := range s.frames {
		add(fr.file.path)
	}
	for _, f := range s.broken {
		add(f.path)
	}
	sort.Strings(s.info.Files)
	s.info.Slices = len(s.frames)
	if len(s.broken) > 0 {
		s.info.Problem = inputProblem(s.broken[0]).Error()
		return
	}
	g, err := s.geometry()
	if err != nil {
		s.info.Problem = err.Error()
		return
	}
	s.info.Orientation = g.affine.Orientation()
	s.info.Volumes = g.volumes
	s.info.Plane = planeName(s.frames[0].rowDir.cross(s.frames[0].colDir))
}

// planeName names the acquisition plane from the slice normal (LPS): the
// axis it is closest to, or oblique when no axis is within about 10°.
func planeName(n pvec) string {
	names := [3]string{"sagittal", "coronal", "axial"}
	best, val := 0, 0.0
	for i := 0; i < 3; i++ {
		if a := math.Abs(n[i]); a > val {
			best, val = i, a
		}
	}
	if val < math.Cos(10*math.Pi/180) {
		return "oblique"
	}
	return names[best]
}

// seriesGeometry is the result of assembling a series' frames.
type seriesGeometry struct {
	order    []dcmFrame // frames in slice order (of the chosen volume)
	affine   volume.Affine
	warnings []string
	volumes  int // volumes the series holds (1 unless every position repeats)
}

// Tolerances of the slice spacing checks, relative to the median spacing.
const (
	spacingQuiet  = 1e-3 // below this, unevenness is rounding in the headers
	spacingRefuse = 0.05 // above this, the volume would be distorted
)

// geometry sorts the frames along the slice normal and builds the voxel →
// RAS affine. Slices are ordered by their position projected on the normal
// n = row direction × column direction (DICOM PS3.3 C.7.6.2.1.1); the slice
// step comes from the positions, never from SliceThickness. Duplicated,
// missing, uneven or misaligned slices are refused; small unevenness and
// gantry-tilt shear are reported as warnings.
func (s *dcmSeries) geometry() (seriesGeometry, error) { return s.volumeGeometry(0) }

// volumeGeometry is geometry for volume index of a series that holds
// several volumes: a series in which every slice position occurs the same
// number k > 1 of times (a time series or several echoes stored as one
// series, as a 4D NIfTI stores them) is split into k volumes, the images at
// each position ordered by InstanceNumber (0020,0013), then file and frame;
// volume index takes the index-th image at every position.
func (s *dcmSeries) volumeGeometry(index int) (seriesGeometry, error) {
	var g seriesGeometry
	frames, dups := uniqueFrames(s.frames)
	if len(frames) == 0 {
		return g, errors.New("series holds no usable images")
	}
	if dups > 0 {
		g.warnings = append(g.warnings, fmt.Sprintf("%d duplicate copies of the same image (same SOPInstanceUID) ignored", dups))
	}
	for _, fr := range frames {
		for _, x := range fr.pos {
			if !(math.Abs(x) <= maxPositionMm) {
				return g, fmt.Errorf("implausible slice position %.4g mm in %s (ImagePositionPatient (0020,0032)); positions beyond ±%g mm are refused", x, frameName(fr), float64(maxPositionMm))
			}
		}
	}
	ref := frames[0]
	n := ref.rowDir.cross(ref.colDir)
	sort.SliceStable(frames, func(a, b int) bool { return frames[a].pos.dot(n) < frames[b].pos.dot(n) })
	vols, err := splitVolumes(frames, n)
	if err != nil {
		return g, err
	}
	g.volumes = len(vols)
	if index < 0 || index >= len(vols) {
		return g, fmt.Errorf("volume %d requested, the series holds %d", index, len(vols))
	}
	frames = vols[index]
	g.order = frames
	step, err := sliceStep(frames, n, &g.warnings)
	if err != nil {
		return g, err
	}
	g.affine = lpsToRAS(ref.rowDir.scale(ref.pixelSpacing[1]), ref.colDir.scale(ref.pixelSpacing[0]), step, frames[0].pos)
	if err := g.affine.Validate(); err != nil {
		return g, fmt.Errorf("slice geometry gives an unusable affine: %w", err)
	}
	return g, nil
}

// uniqueFrames drops repeated copies of one image (same SOP Instance UID
// and frame), which folders copied twice often hold.
func uniqueFrames(in []dcmFrame) ([]dcmFrame, int) {
	seen := map[string]bool{}
	out := make([]dcmFrame, 0, len(in))
	for _, fr := range in {
		if uid := fr.file.sopInstance; uid != "" {
			k := uid + "#" + strconv.Itoa(fr.index)
			if seen[k] {
				continue
			}
			seen[k] = true
		}
		out = append(out, fr)
	}
	return out, len(in) - len(out)
}

// sliceStep checks the sorted slice positions and returns the LPS vector
// from one slice to the next.
func sliceStep(frames []dcmFrame, n pvec, warnings *[]string) (pvec, error) {
	if len(frames) == 1 {
		fr := frames[0]
		th := fr.spacing
		if th <= 0 {
			th = fr.thickness
		}
		if th <= 0 {
			th = 1
			*warnings = append(*warnings, "single slice without SliceThickness: slice axis given 1 mm")
		}
		return n.scale(th), nil
	}
	d := make([]float64, len(frames)-1)
	for i := range d {
		d[i] = frames[i+1].pos.dot(n) - frames[i].pos.dot(n)
	}
	med := dcmMedian(d)
	for i, x := range d {
		if x < 1e-3*math.Max(med, 1e-3) || x < 1e-4 {
			return pvec{}, fmt.Errorf("two slices at the same position (%.4g mm along the normal): %s and %s",
				frames[i].pos.dot(n), frameName(frames[i]), frameName(frames[i+1]))
		}
	}
	if err := checkEvenSpacing(frames, d, med, warnings); err != nil {
		return pvec{}, err
	}
	last := len(frames) - 1
	step := frames[last].pos.sub(frames[0].pos).scale(1 / float64(last))
	if err := checkCollinear(frames, step); err != nil {
		return pvec{}, err
	}
	if sin := step.cross(n).norm() / step.norm(); sin > 1e-3 {
		*warnings = append(*warnings, fmt.Sprintf("slices are sheared by %.2f° from the slice normal (gantry tilt); the affine keeps the shear",
			math.Asin(math.Min(sin, 1))*180/math.Pi))
	}
	return step, nil
}

// maxPositionMm bounds a coordinate of ImagePositionPatient: 1 km, far
// beyond any scanner's field of view, so that sums of positions stay exact
// enough and finite.
const maxPositionMm = 1e6

// maxSliceGap bounds a gap between slices, in median spacings, that is
// still read as missing slices rather than as wrong positions.
const maxSliceGap = maxDICOMFrames

// checkEvenSpacing refuses missing slices and uneven spacing.
func checkEvenSpacing(frames []dcmFrame, d []float64, med float64, warnings *[]string) error {
	lo, hi, worst := math.Inf(1), math.Inf(-1), 0.0
	for i, x := range d {
		lo, hi = math.Min(lo, x), math.Max(hi, x)
		rel := math.Abs(x-med) / med
		worst = math.Max(worst, rel)
		if rel <= spacingRefuse {
			continue
		}
		a, b := frameName(frames[i]), frameName(frames[i+1])
		if !(x <= maxSliceGap*med) || math.IsInf(med, 0) {
			return fmt.Errorf("implausible slice positions: %.4g mm between %s and %s where the spacing is %.4g mm (ImagePositionPatient (0020,0032))", x, a, b, med)
		}
		if m := math.Round(x / med); m >= 2 && math.Abs(x/med-m) <= spacingRefuse {
			return fmt.Errorf("missing slice: %.4g mm between %s and %s where the spacing is %.4g mm (%d slice(s) missing)",
				x, a, b, med, int(m)-1)
		}
		return fmt.Errorf("uneven slice spacing: %.4g mm between %s and %s, %.4g mm elsewhere", x, a, b, med)
	}
	if worst > spacingQuiet {
		*warnings = append(*warnings, fmt.Sprintf("slice spacing varies from %.4g to %.4g mm; the volume uses the mean spacing", lo, hi))
	}
	return nil
}

// checkCollinear refuses slices whose positions leave the line from the
// first to the last slice (shifted in plane), beyond rounding.
func checkCollinear(frames []dcmFrame, step pvec) error {
	ref := frames[0]
	tol := 0.05 * math.Min(math.Min(ref.pixelSpacing[0], ref.pixelSpacing[1]), step.norm())
	for i, fr := range frames {
		want := frames[0].pos.add(step.scale(float64(i)))
		if off := fr.pos.sub(want).norm(); off > math.Max(tol, 1e-3) {
			return fmt.Errorf("slice %s is %.3g mm off the line through the other slice positions", frameName(fr), off)
		}
	}
	return nil
}

func dcmMedian(x []float64) float64 {
	c := append([]float64(nil), x...)
	sort.Float64s(c)
	if len(c)%2 == 1 {
		return c[len(c)/2]
	}
	return (c[len(c)/2-1] + c[len(c)/2]) / 2
}

// frameName names a frame by its file (and frame number in multi-frame files).
func frameName(fr dcmFrame) string {
	if fr.file.frames > 1 {
		return fmt.Sprintf("%s frame %d", fr.file.path, fr.index+1)
	}
	return fr.file.path
}

// lpsToRAS builds the voxel → RAS affine from LPS columns and origin: RAS
// is LPS with x and y negated.
func lpsToRAS(c0, c1, c2, origin pvec) volume.Affine {
	a := volume.Identity()
	cols := [4]pvec{c0, c1, c2, origin}
	sign := [3]float64{-1, -1, 1}
	for c, v := range cols {
		for r := 0; r < 3; r++ {
			a[r][c] = sign[r] * v[r]
		}
	}
	return a
}

// maxListed bounds how many series an error message lists.
const maxListed = 12

// describeSeries lists series for a one-line error message.
func describeSeries(all []*dcmSeries) string {
	parts := make([]string, 0, len(all))
	for i, s := range all {
		if i == maxListed {
			parts = append(parts, fmt.Sprintf("and %d more", len(all)-maxListed))
			break
		}
		d := s.info.Description
		if d == "" {
			d = "no description"
		}
		p := fmt.Sprintf("%s (%s, %s, %s)", s.info.Key, d, dcmOrDash(s.info.Modality), plural(s.info.Slices, "image"))
		if s.info.Problem != "" {
			p += " [unreadable]"
		}
		parts = append(parts, p)
	}
	return strings.Join(parts, "; ")
}

func dcmOrDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

// plural is "1 image" or "n images".
func plural(n int, noun string) string {
	if n == 1 {
		return "1 " + noun
	}
	return fmt.Sprintf("%d %ss", n, noun)
}

// splitVolumes groups frames sorted along the normal n by position: when
// every position holds the same number k of images, it returns k volumes
// (the images at each position ordered by InstanceNumber, then file path
// and frame); when positions are distinct, the frames as one volume. Any
// other pattern is left to sliceStep, which names the two slices at the
// same position.
func splitVolumes(frames []dcmFrame, n pvec) ([][]dcmFrame, error) {
	var groups [][]dcmFrame
	for i, fr := range frames {
		if i > 0 && samePosition(frames[i-1], fr, n) {
			groups[len(groups)-1] = append(groups[len(groups)-1], fr)
			continue
		}
		groups = append(groups, []dcmFrame{fr})
	}
	k := len(groups[0])
	for _, g := range groups {
		if len(g) != k {
			return [][]dcmFrame{frames}, nil
		}
	}
	if k == 1 || len(groups) == 1 {
		return [][]dcmFrame{frames}, nil
	}
	vols := make([][]dcmFrame, k)
	for _, g := range groups {
		sort.SliceStable(g, func(a, b int) bool {
			fa, fb := g[a], g[b]
			if fa.file.instanceNumber != fb.file.instanceNumber {
				return fa.file.instanceNumber < fb.file.instanceNumber
			}
			if fa.file.path != fb.file.path {
				return fa.file.path < fb.file.path
			}
			return fa.index < fb.index
		})
		for v := range vols {
			vols[v] = append(vols[v], g[v])
		}
	}
	return vols, nil
}

// samePosition reports whether two frames lie at the same position along
// the normal n (within 1 µm) and in the plane (within 1 µm).
func samePosition(a, b dcmFrame, n pvec) bool {
	return math.Abs(a.pos.dot(n)-b.pos.dot(n)) < 1e-3 && dcmCloseVec(a.pos, b.pos, 1e-3)
}
