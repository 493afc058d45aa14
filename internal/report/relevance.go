package report

import (
	"bytes"
	"encoding/json"
	"fmt"
	"path/filepath"

	"brightfold/internal/atomicfile"
	"brightfold/internal/notice"
	"brightfold/internal/volume"
	"brightfold/internal/volume/nifti"
)

// Relevance output file names, written side by side.
const (
	RelevanceFile    = "relevance.nii.gz"
	RelevanceSidecar = "relevance.json"
	OverlayFile      = "overlay.png"
)

// RelevanceInfo is the JSON sidecar of a relevance map: what the map is,
// how it was made and its method's checks. It holds no patient identifiers.
type RelevanceInfo struct {
	Notice      string `json:"notice"`
	File        string `json:"file"`
	Method      string `json:"method"`
	MethodName  string `json:"method_name"`
	Reference   string `json:"reference"`
	About       string `json:"about"`
	Rule        string `json:"rule"`
	TargetClass string `json:"target_class"`
	TargetLogit Number `json:"target_logit"`
	Probability Number `json:"probability"` // calibrated, of the target class
	// InputShare is the map's sum over the target logit (absent for
	// occlusion, whose values are not shares); Shares says it in a sentence
	// with what LRP's biases and stabilisers keep.
	InputShare *Number           `json:"input_share,omitempty"`
	Shares     string            `json:"shares,omitempty"`
	Units      string            `json:"units"`
	Space      string            `json:"space"`
	Input      string            `json:"input"`
	Dims       [3]int            `json:"dims"`
	Affine     volume.Affine     `json:"affine"` // voxel index → RAS mm, row-major
	ModelGrid  ModelGrid         `json:"model_grid"`
	Checks     map[string]Number `json:"checks"`
	Settings   map[string]any    `json:"settings"`
	Passes     int               `json:"passes"`
	Model      Model             `json:"model"`
	FitCheck   string            `json:"fit_check"`
}

// ModelGrid is the grid the map was computed on before it was carried onto
// the scan.
type ModelGrid struct {
	Dims   [3]int        `json:"dims"`
	Affine volume.Affine `json:"affine"`
}

// WriteRelevance writes m as DIR/relevance.nii.gz (float32, notice.Short in
// the 80-byte descrip field, NIfTI-1) and info as DIR/relevance.json, both
// atomically, and returns their paths.
func WriteRelevance(dir string, m *volume.Volume, info RelevanceInfo) (nii, sidecar string, err error) {
	nii = filepath.Join(dir, RelevanceFile)
	sidecar = filepath.Join(dir, RelevanceSidecar)
	info.Notice, info.File = notice.Full, RelevanceFile
	info.Dims, info.Affine = m.Dims, m.Affine
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	if err := enc.Encode(info); err != nil {
		return "", "", fmt.Errorf("encode %s: %w", RelevanceSidecar, err)
	}
	out := *m
	out.Patient, out.Source = volume.Identifiers{}, ""
	if err := nifti.Write(nii, &out, nifti.WriteOptions{DataType: nifti.DTFloat32, Description: notice.Short}); err != nil {
		return "", "", err
	}
	if err := atomicfile.WriteBytes(sidecar, buf.Bytes()); err != nil {
		return "", "", err
	}
	return nii, sidecar, nil
}
