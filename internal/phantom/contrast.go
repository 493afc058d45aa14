package phantom

import (
	"math"

	"brightfold/internal/volume"
)

// contrast maps tissues to intensities and sets the noise and bias of one scan.
type contrast struct {
	value    [numTissues]float64
	sigma    float64 // noise standard deviation, in output units
	biasAmp  float64 // amplitude of the multiplicative bias field
	rician   bool    // magnitude MR noise (Rician); otherwise Gaussian
	meta     volume.Metadata
	minValue float64 // lowest value the scan may hold after noise
}

// site is one invented acquisition site.
type site struct {
	scale      float64 // white-matter intensity on a T1 scan
	gm, csf    float64 // grey matter and CSF relative to white matter
	noise      float64 // noise s.d. relative to white matter
	bias       float64 // bias field amplitude
	tr, te, ti float64 // ms
	flip       float64 // degrees
}

// The sites differ in intensity scale, grey/white contrast, noise and bias;
// the sequence parameters are typical of a 3 T inversion-prepared T1
// gradient-echo sequence (common practice, from memory).
var sites = map[string]site{
	"site-A": {scale: 1000, gm: 0.60, csf: 0.20, noise: 0.022, bias: 0.06, tr: 2300, te: 2.9, ti: 900, flip: 9},
	"site-B": {scale: 700, gm: 0.65, csf: 0.25, noise: 0.035, bias: 0.15, tr: 2000, te: 3.4, ti: 1000, flip: 8},
	"site-C": {scale: 1600, gm: 0.57, csf: 0.17, noise: 0.028, bias: 0.10, tr: 1900, te: 2.5, ti: 900, flip: 9},
}

// T1 tissue values relative to white matter (the order WM > deep GM > GM >
// CSF, with bright fat and dark cortical bone, is that of T1-weighted MR).
func t1Values(st site, jitter float64) [numTissues]float64 {
	gm := st.gm + jitter
	return [numTissues]float64{
		Air: 0, Scalp: 0.85, Bone: 0.06, Marrow: 0.62, Neck: 0.5,
		CSF: st.csf, Ventricle: st.csf, GM: gm, WM: 1, DeepGM: (gm + 1) / 2 * 0.98,
		Hippocampus: gm + 0.02, Amygdala: gm + 0.03,
	}
}

// T2 tissue values relative to CSF: fluid bright, white matter darker than grey.
var t2Values = [numTissues]float64{
	Air: 0, Scalp: 0.55, Bone: 0.04, Marrow: 0.5, Neck: 0.3,
	CSF: 1, Ventricle: 1, GM: 0.52, WM: 0.38, DeepGM: 0.44, Hippocampus: 0.55, Amygdala: 0.53,
}

// CT values in Hounsfield units (air −1000, water 0; typical head CT values:
// bone about +1000, grey matter 35–40, white matter 25–30, CSF near 5;
// common knowledge, from memory).
var ctValues = [numTissues]float64{
	Air: -1000, Scalp: -60, Bone: 1100, Marrow: 450, Neck: 45,
	CSF: 6, Ventricle: 6, GM: 38, WM: 28, DeepGM: 35, Hippocampus: 37, Amygdala: 37,
}

func newContrast(s *Subject) contrast {
	st := sites[s.Site]
	d := &s.draw
	c := contrast{rician: true, biasAmp: st.bias, minValue: 0}
	c.meta = volume.Metadata{Modality: "MR", Manufacturer: "Brightfold phantom", Site: s.Site,
		FieldStrengthT: 3, RepetitionTimeMs: st.tr, EchoTimeMs: st.te, InversionTimeMs: st.ti,
		FlipAngleDeg: st.flip, SeriesDescription: "T1w 3D synthetic phantom"}
	scale := st.scale * d.gain
	switch s.Shift {
	case ShiftCT:
		c.value = ctValues
		c.sigma, c.biasAmp, c.rician, c.minValue = 5, 0, false, -1024
		// A brain window of 40/80 HU (common practice).
		c.meta = volume.Metadata{Modality: "CT", Manufacturer: "Brightfold phantom", Site: s.Site,
			SeriesDescription: "CT head synthetic phantom", WindowCenter: 40, WindowWidth: 80}
		return c
	case ShiftT2:
		for i, v := range t2Values {
			c.value[i] = v * scale
		}
		c.sigma = st.noise * scale * 0.5
		c.meta.RepetitionTimeMs, c.meta.EchoTimeMs, c.meta.InversionTimeMs, c.meta.FlipAngleDeg = 5000, 100, 0, 90
		c.meta.SeriesDescription = "T2w synthetic phantom"
		c.meta.WindowCenter, c.meta.WindowWidth = math.Round(0.5*scale), math.Round(1.1*scale)
		return c
	}
	for i, v := range t1Values(st, d.contrast) {
		c.value[i] = v * scale
	}
	c.sigma = st.noise * scale
	c.meta.WindowCenter, c.meta.WindowWidth = math.Round(0.55*scale), math.Round(1.2*scale)
	if s.Shift == ShiftNoisy {
		c.sigma *= 8
	}
	return c
}
