package phantom

import (
	"fmt"
	"math"
	"math/rand/v2"
)

// Shift names a deliberate departure from the training distribution.
type Shift string

// The shifts; ShiftNone is in-distribution.
const (
	ShiftNone    Shift = "none"
	ShiftCT      Shift = "ct"      // CT-like intensities in Hounsfield units
	ShiftT2      Shift = "t2"      // T2-like contrast: CSF bright
	ShiftThick   Shift = "thick"   // 1 x 1 x 6 mm voxels (slab-averaged slices)
	ShiftCropped Shift = "cropped" // field of view cut: the top of the head is missing
	ShiftFlipped Shift = "flipped" // data flipped head to foot, affine left as if not
	ShiftNoisy   Shift = "noisy"   // eight times the site's noise
	ShiftChild   Shift = "child"   // paediatric-size head, no atrophy
)

// Shifts lists the shifted variants (without ShiftNone) in a fixed order.
func Shifts() []Shift {
	return []Shift{ShiftCT, ShiftT2, ShiftThick, ShiftCropped, ShiftFlipped, ShiftNoisy, ShiftChild}
}

// ParseShift accepts a shift name; "" means ShiftNone.
func ParseShift(s string) (Shift, error) {
	if s == "" || s == string(ShiftNone) {
		return ShiftNone, nil
	}
	for _, sh := range Shifts() {
		if string(sh) == s {
			return sh, nil
		}
	}
	return "", fmt.Errorf("unknown shift %q", s)
}

// Sites are the invented acquisition sites; each changes intensity scale,
// noise and bias field.
var siteNames = [...]string{"site-A", "site-B", "site-C"}

// Subject is the drawn description of one case: covariates, label and the
// random shape parameters. Change Severity with WithSeverity to render the
// same person with and without the pattern.
type Subject struct {
	Seed      uint64
	Index     int
	ID        string  // case code, HMRU-0001 for index 0
	Label     int     // 1 when the atrophy pattern is present
	Severity  float64 // pattern severity in (0, 1] when Label is 1, else 0
	Age       float64 // years
	Sex       string  // "F" or "M"
	HeadScale float64 // linear size relative to the standard head
	Site      string  // "site-A", "site-B" or "site-C"
	Shift     Shift

	draw shapeDraw
}

// CaseID is the case code of a 0-based index.
func CaseID(index int) string { return fmt.Sprintf("HMRU-%04d", index+1) }

// WithSeverity returns s with the pattern at severity sev (0 removes it).
func (s Subject) WithSeverity(sev float64) Subject {
	sev = math.Max(0, math.Min(1, sev))
	s.Severity = sev
	s.Label = 0
	if sev > 0 {
		s.Label = 1
	}
	return s
}

// Random streams derived from (seed, index).
const (
	streamSubject uint64 = 1
	streamShape   uint64 = 2
	streamPair    uint64 = 3
	streamNoise   uint64 = 1 << 32
)

// newRand returns the PCG stream for (seed, index, stream).
func newRand(seed uint64, index int, stream uint64) *rand.Rand {
	return rand.New(rand.NewPCG(seed, mix(uint64(index), stream)))
}

// mix is the splitmix64 finaliser of a and b, so that nearby indices and
// streams give unrelated PCG sequences.
func mix(a, b uint64) uint64 {
	z := a*0x9E3779B97F4A7C15 + b*0xD1B54A32D192ED03 + 0x632BE59BD9B4E019
	z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9
	z = (z ^ (z >> 27)) * 0x94D049BB133111EB
	return z ^ (z >> 31)
}

// pairLabel makes exactly one of each pair of cases (2m, 2m+1) positive,
// chosen at random, so that any even-sized cohort is balanced.
func pairLabel(seed uint64, index int) int {
	r := newRand(seed, index/2, streamPair)
	if r.IntN(2) == index%2 {
		return 1
	}
	return 0
}

// NewSubject draws case index of the cohort with the given seed. The shift
// changes only the acquisition, except ShiftChild, which makes a child's
// head without the pattern.
func NewSubject(seed uint64, index int, shift Shift) Subject {
	r := newRand(seed, index, streamSubject)
	s := Subject{Seed: seed, Index: index, ID: CaseID(index), Shift: shift}
	s.Label = pairLabel(seed, index)
	u := r.Float64()
	if s.Label == 1 {
		// Severity in (0.25, 1]: slighter patterns would be indistinguishable
		// from normal ageing.
		s.Severity = 1 - 0.75*u
	}
	s.Sex = "F"
	if r.IntN(2) == 1 {
		s.Sex = "M"
	}
	// Positive cases are somewhat older (atrophy is commoner with age), which
	// makes age a partial confounder, as in real memory-clinic cohorts.
	if s.Label == 1 {
		s.Age = 60 + 25*math.Sqrt(r.Float64())
	} else {
		s.Age = 55 + 30*r.Float64()
	}
	base := 0.97
	if s.Sex == "M" {
		base = 1.03
	}
	s.HeadScale = clamp(base*(1+0.03*r.NormFloat64()), 0.9, 1.1)
	s.Site = drawSite(r, s.Label)
	s.draw = drawShape(newRand(seed, index, streamShape))
	if shift == ShiftChild {
		s.Age = 6 + 6*r.Float64()
		s.HeadScale = clamp(0.8*(1+0.02*r.NormFloat64()), 0.74, 0.86)
		s = s.WithSeverity(0)
	}
	return s
}

// drawSite picks a site with a mild imbalance between the classes (site-B
// sees more positive cases), a confounder a model should not rely on.
func drawSite(r *rand.Rand, label int) string {
	p := [3]float64{0.45, 0.30, 0.25}
	if label == 1 {
		p = [3]float64{0.30, 0.45, 0.25}
	}
	u := r.Float64()
	for i, pi := range p {
		if u < pi {
			return siteNames[i]
		}
		u -= pi
	}
	return siteNames[len(siteNames)-1]
}

// clamp limits x to [lo, hi] (NaN stays NaN).
func clamp(x, lo, hi float64) float64 {
	if x < lo {
		return lo
	}
	if x > hi {
		return hi
	}
	return x
}
