package main

import (
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strings"

	"brightfold/internal/notice"
	"brightfold/internal/volume"
	"brightfold/internal/volume/dicom"
	_ "brightfold/internal/volume/formats"
	"brightfold/internal/volume/nifti"
)

// inspectReport is the JSON of one inspected input.
type inspectReport struct {
	Notice      string           `json:"notice"`
	Input       string           `json:"input"`
	Format      string           `json:"format"`
	Dims        []int            `json:"dims,omitempty"` // x, y, z[, t]
	SpacingMm   []float64        `json:"spacing_mm,omitempty"`
	Affine      *volume.Affine   `json:"affine,omitempty"` // voxel index → RAS mm, row-major
	Orientation string           `json:"orientation,omitempty"`
	Min         *float64         `json:"min,omitempty"`
	Max         *float64         `json:"max,omitempty"`
	Mean        *float64         `json:"mean,omitempty"`
	Warnings    []string         `json:"warnings"`
	Metadata    *volume.Metadata `json:"metadata,omitempty"`
	Series      []seriesSummary  `json:"series,omitempty"`
	// Note explains a report without a volume (several DICOM series).
	Note    string           `json:"note,omitempty"`
	Patient *patientIdentity `json:"patient,omitempty"` // only with --show-identifiers
	// Identifiers is "hidden" when the input has patient identifiers that
	// were not asked for.
	Identifiers string `json:"identifiers,omitempty"`
}

// seriesSummary is one DICOM series as inspect shows it: no file paths,
// which may carry names.
type seriesSummary struct {
	Key         string `json:"key"`
	UID         string `json:"uid"`
	Number      int    `json:"number,omitempty"`
	Description string `json:"description,omitempty"`
	Modality    string `json:"modality,omitempty"`
	Slices      int    `json:"slices"`
	Rows        int    `json:"rows"`
	Cols        int    `json:"cols"`
	Orientation string `json:"orientation,omitempty"`
	Plane       string `json:"plane,omitempty"`
	Files       int    `json:"files"`
	Problem     string `json:"problem,omitempty"`
}

// patientIdentity carries the identifiers when the user asked for them.
type patientIdentity struct {
	Name        string `json:"name,omitempty"`
	ID          string `json:"id,omitempty"`
	BirthDate   string `json:"birth_date,omitempty"`
	StudyDate   string `json:"study_date,omitempty"`
	Accession   string `json:"accession,omitempty"`
	Institution string `json:"institution,omitempty"`
}

type inspectOptions struct {
	json, showIDs bool
	volumeIndex   int
	series        string
}

// runInspect prints the header, geometry and value range of each input:
// every NIfTI path on its own, all other paths together as DICOM input.
func runInspect(e *env, args []string) error {
	fs := newFlags(e, "inspect")
	var o inspectOptions
	fs.BoolVar(&o.json, "json", false, "print JSON instead of text")
	fs.BoolVar(&o.showIDs, "show-identifiers", false, "also print patient identifiers (hidden by default)")
	fs.IntVar(&o.volumeIndex, "volume", 0, "volume `N` of a 4D NIfTI input to describe (from 0)")
	fs.StringVar(&o.series, "series", "", "DICOM series `KEY` to describe when the input holds several")
	fs.Usage = commandHelp(fs, "inspect PATH... [--json] [--show-identifiers] [--volume N] [--series KEY]")
	paths, err := parseFlags(fs, args)
	if err != nil {
		return err
	}
	if len(paths) == 0 {
		return usageError("brightfold inspect: give a NIfTI file, DICOM files or a DICOM folder")
	}
	if paths, err = volume.CheckPaths(paths); err != nil {
		return err
	}
	var reports []*inspectReport
	var dicom []string
	for _, p := range paths {
		if nifti.IsPath(p) {
			r, err := inspectNIfTI(p, o)
			if err != nil {
				return err
			}
			reports = append(reports, r)
		} else {
			dicom = append(dicom, p)
		}
	}
	if len(dicom) > 0 {
		r, err := inspectDICOM(dicom, o)
		if err != nil {
			return err
		}
		reports = append(reports, r)
	}
	if o.json {
		return writeInspectJSON(e.stdout, reports)
	}
	fmt.Fprintln(e.stdout, notice.Full)
	for _, r := range reports {
		fmt.Fprintln(e.stdout)
		writeInspectText(e.stdout, r)
	}
	return nil
}

func inspectNIfTI(p string, o inspectOptions) (*inspectReport, error) {
	v, err := volume.Load([]string{p}, volume.LoadOptions{VolumeIndex: o.volumeIndex})
	if err != nil {
		return nil, err
	}
	return volumeReport(p, v, o), nil
}

// inspectDICOM lists the series and describes the chosen one (or the only
// one); with several series and no choice, the report is the list.
func inspectDICOM(paths []string, o inspectOptions) (*inspectReport, error) {
	series, err := dicom.ListSeries(paths)
	if err != nil {
		return nil, err
	}
	input := strings.Join(paths, " ")
	if len(series) > 1 && o.series == "" {
		r := &inspectReport{Notice: notice.Full, Input: input, Format: "dicom", Warnings: []string{}}
		r.Series = summarise(series)
		r.Note = fmt.Sprintf("%d series; choose one with --series KEY to describe its volume", len(series))
		return r, nil
	}
	v, err := volume.Load(paths, volume.LoadOptions{SeriesUID: o.series})
	if err != nil {
		return nil, err
	}
	r := volumeReport(input, v, o)
	r.Series = summarise(series)
	return r, nil
}

func summarise(series []dicom.SeriesInfo) []seriesSummary {
	out := make([]seriesSummary, len(series))
	for i, s := range series {
		out[i] = seriesSummary{Key: s.Key, UID: s.UID, Number: s.Number, Description: s.Description,
			Modality: s.Modality, Slices: s.Slices, Rows: s.Rows, Cols: s.Cols, Orientation: s.Orientation,
			Plane: s.Plane, Files: len(s.Files), Problem: s.Problem}
	}
	return out
}

func volumeReport(input string, v *volume.Volume, o inspectOptions) *inspectReport {
	sp := v.Spacing()
	aff := v.Affine
	meta := v.Meta
	r := &inspectReport{
		Notice:    notice.Full,
		Input:     input,
		Format:    v.Meta.Format,
		Dims:      []int{v.Dims[0], v.Dims[1], v.Dims[2]},
		SpacingMm: sp[:],
		Affine:    &aff,
		Warnings:  append([]string{}, v.Warnings...),
		Metadata:  &meta,
	}
	if v.Meta.NumVolumes > 1 {
		r.Dims = append(r.Dims, v.Meta.NumVolumes)
	}
	if m, err := volume.ClosestAxes(v.Affine); err == nil {
		r.Orientation = m.Code()
	}
	mn, mx, mean := v.Stats()
	r.Min, r.Max, r.Mean = finite(mn), finite(mx), finite(mean)
	if o.showIDs && !v.Patient.Empty() {
		p := v.Patient
		r.Patient = &patientIdentity{Name: p.Name, ID: p.ID, BirthDate: p.BirthDate, StudyDate: p.StudyDate,
			Accession: p.Accession, Institution: p.Institution}
	} else if !v.Patient.Empty() {
		r.Identifiers = "hidden"
	}
	return r
}

// finite returns a pointer to x, or nil (JSON null) for NaN or infinity.
func finite(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

func writeInspectJSON(w io.Writer, reports []*inspectReport) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	var err error
	if len(reports) == 1 {
		err = enc.Encode(reports[0])
	} else {
		err = enc.Encode(reports)
	}
	if err != nil {
		return fmt.Errorf("encode inspect report: %w", err)
	}
	return nil
}

func writeInspectText(w io.Writer, r *inspectReport) {
	line := func(label, format string, args ...any) {
		fmt.Fprintf(w, "  %-13s %s\n", label, fmt.Sprintf(format, args...))
	}
	fmt.Fprintln(w, r.Input)
	line("format", "%s", strings.ToUpper(r.Format))
	if r.Note != "" {
		line("note", "%s", r.Note)
	}
	if r.Affine != nil {
		writeGeometryText(line, r)
	}
	if m := r.Metadata; m != nil {
		writeMetadataText(line, m)
	}
	if r.Identifiers != "" {
		line("patient", "identifiers %s (--show-identifiers prints them)", r.Identifiers)
	}
	if p := r.Patient; p != nil {
		line("patient", "name %q, ID %q, born %q", p.Name, p.ID, p.BirthDate)
		line("study", "date %q, accession %q, institution %q", p.StudyDate, p.Accession, p.Institution)
	}
	for i, s := range r.Series {
		label := ""
		if i == 0 {
			label = "series"
		}
		line(label, "%s", seriesText(s))
	}
	for i, warn := range r.Warnings {
		label := ""
		if i == 0 {
			label = "warnings"
		}
		line(label, "- %s", warn)
	}
}

// seriesText is one line of a series list: key, modality and description,
// matrix, plane and axis code, files, and the problem if there is one.
func seriesText(s seriesSummary) string {
	key := s.Key
	if key == "" {
		key = "(no SeriesInstanceUID)"
	}
	parts := []string{key}
	if what := strings.TrimSpace(s.Modality + " " + s.Description); what != "" {
		parts = append(parts, what)
	}
	parts = append(parts, fmt.Sprintf("%d×%d×%d", s.Cols, s.Rows, s.Slices))
	if where := strings.TrimSpace(s.Plane + " " + s.Orientation); where != "" {
		parts = append(parts, where)
	}
	parts = append(parts, fmt.Sprintf("%d file(s)", s.Files))
	text := strings.Join(parts, ", ")
	if s.Problem != "" {
		text += "; cannot load: " + s.Problem
	}
	return text
}

func writeGeometryText(line func(string, string, ...any), r *inspectReport) {
	dims := make([]string, len(r.Dims))
	for i, d := range r.Dims {
		dims[i] = fmt.Sprint(d)
	}
	line("dims", "%s", strings.Join(dims, " × "))
	line("spacing", "%.4g × %.4g × %.4g mm", r.SpacingMm[0], r.SpacingMm[1], r.SpacingMm[2])
	line("orientation", "%s (voxel axes point towards these ends)", r.Orientation)
	for i, row := range r.Affine {
		label := ""
		if i == 0 {
			label = "affine (RAS)"
		}
		line(label, "[%10.4f %10.4f %10.4f %10.4f ]", tidy(row[0]), tidy(row[1]), tidy(row[2]), tidy(row[3]))
	}
	num := func(p *float64) string {
		if p == nil {
			return "none"
		}
		return fmt.Sprintf("%.6g", *p)
	}
	line("values", "min %s  max %s  mean %s", num(r.Min), num(r.Max), num(r.Mean))
}

// tidy rounds x to 4 decimals and turns -0 into 0 for display.
func tidy(x float64) float64 { return math.Round(x*1e4)/1e4 + 0 }

func writeMetadataText(line func(string, string, ...any), m *volume.Metadata) {
	if m.DataType != "" {
		line("stored as", "%s", m.DataType)
	}
	if m.NumVolumes > 1 {
		line("volume", "%d of %d (--volume picks another)", m.VolumeIndex, m.NumVolumes)
	}
	for _, f := range []struct{ label, value string }{
		{"modality", m.Modality}, {"series", m.SeriesDescription}, {"manufacturer", m.Manufacturer},
		{"site", m.Site}, {"description", m.Description}, {"syntax", m.TransferSyntax},
	} {
		if f.value != "" {
			line(f.label, "%s", f.value)
		}
	}
	var acq []string
	for _, f := range []struct {
		name, unit string
		v          float64
	}{
		{"field", "T", m.FieldStrengthT}, {"TR", "ms", m.RepetitionTimeMs}, {"TE", "ms", m.EchoTimeMs},
		{"TI", "ms", m.InversionTimeMs}, {"flip", "°", m.FlipAngleDeg}, {"slice", "mm", m.SliceThicknessMm},
	} {
		if f.v != 0 {
			acq = append(acq, fmt.Sprintf("%s %.4g %s", f.name, f.v, f.unit))
		}
	}
	if len(acq) > 0 {
		line("acquisition", "%s", strings.Join(acq, ", "))
	}
}
