package inference

import (
	"math"

	"brightfold/inference/fitcheck"
	"brightfold/inference/preprocess"
	"brightfold/internal/stats"
	"brightfold/internal/volume"
)

// CaseFacts are the model-free measurements of one scan that the fit checks
// compare with the card's envelope and intensity reference, and that
// FitReference summarises over training scans. MeasureCase is the one place
// they are computed.
type CaseFacts struct {
	Modality         string     `json:"modality"`
	SpacingMm        [3]float64 `json:"spacing_mm"`
	SliceThicknessMm float64    `json:"slice_thickness_mm"` // largest spacing, or the header's thickness when larger
	FOVMm            [3]float64 `json:"fov_mm"`             // along R, A, S
	Dims             [3]int     `json:"dims"`
	Anisotropy       float64    `json:"anisotropy"`
	ObliquityDeg     float64    `json:"obliquity_deg"`
	Orientation      string     `json:"orientation"`
	NumVolumes       int        `json:"num_volumes"`
	HeadVolumeMl     float64    `json:"head_volume_ml"`
	HeadAPOverLR     float64    `json:"head_ap_over_lr"`
	HeadSIOverAP     float64    `json:"head_si_over_ap"`
	HeadSkewSI       float64    `json:"head_skew_si"`
	NoiseRatio       float64    `json:"noise_ratio"`
	HUAirFraction    float64    `json:"hu_air_fraction"`
	HUBoneFraction   float64    `json:"hu_bone_fraction"`
	InsideFOV        float64    `json:"inside_fov"`
	Quantiles        []float64  `json:"quantiles"` // normalised head intensities at the levels
}

// MeasureCase measures a scan v and its preprocessing pr; levels are the
// quantile levels of the intensity profile (the card's, when checking).
func MeasureCase(v *volume.Volume, pr *preprocess.Prepared, levels []float64) CaseFacts {
	f := MeasureHeader(v)
	f.HeadVolumeMl, f.InsideFOV = pr.Head.VolumeMl, pr.InsideFOV
	if e := pr.Head.ExtentMm; e[0] > 0 && e[1] > 0 {
		f.HeadAPOverLR = e[1] / e[0]
		f.HeadSIOverAP = e[2] / e[1]
	}
	f.HeadSkewSI = pr.Head.Skewness[2]
	f.NoiseRatio = fitcheck.NoiseRatio(v, pr.ScanHeadThreshold)
	f.Quantiles = headQuantiles(pr.Tensor, levels)
	return f
}

// MeasureHeader measures what needs no preprocessing: the header facts and
// the Hounsfield-unit signature of the raw voxels.
func MeasureHeader(v *volume.Volume) CaseFacts {
	sp := v.Spacing()
	f := CaseFacts{Modality: v.Meta.Modality, SpacingMm: sp, Dims: v.Dims, NumVolumes: max(1, v.Meta.NumVolumes),
		ObliquityDeg: fitcheck.ObliquityDeg(v.Affine), Orientation: v.Affine.Orientation(), FOVMm: fitcheck.FOVMm(v)}
	lo, hi := math.Min(sp[0], math.Min(sp[1], sp[2])), math.Max(sp[0], math.Max(sp[1], sp[2]))
	f.SliceThicknessMm = math.Max(hi, v.Meta.SliceThicknessMm)
	f.Anisotropy = hi / lo
	f.HUAirFraction, f.HUBoneFraction = fitcheck.HUSignature(v.Data)
	return f
}

// headQuantiles are the quantiles of the normalised tensor over the head mask.
func headQuantiles(t *preprocess.Tensor, levels []float64) []float64 {
	g := t.GridValues()
	var head []float32
	for i, m := range t.HeadMask {
		if m {
			head = append(head, g[i])
		}
	}
	fitcheck.SortFloat32(head) // the tensor is finite (checkTensorFinite)
	return stats.Quantiles(head, levels)
}
