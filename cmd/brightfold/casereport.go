package main

import (
	"context"
	"flag"
	"fmt"
	"image"
	"io"
	"os"
	"path/filepath"

	"brightfold/inference"
	"brightfold/internal/atomicfile"
	"brightfold/internal/inputerr"
	"brightfold/internal/reading"
	"brightfold/internal/report"
	"brightfold/internal/volume"
	"brightfold/overlay"
	"brightfold/viewer"
)

// caseReportOptions are score's flags for the one-page case report.
type caseReportOptions struct {
	file, session, code string
	meeting             bool
}

func caseReportFlags(fs *flag.FlagSet, o *caseReportOptions) {
	fs.StringVar(&o.file, "report", "", "write a one-page case report PDF for a meeting to FILE.pdf")
	fs.StringVar(&o.session, "session", "", "with --report: a reading session whose reads of this case go into the report")
	fs.StringVar(&o.code, "case", "", "with --session: the case code (default: the session case whose scan is PATH)")
	fs.BoolVar(&o.meeting, "meeting", false, "with --report: Meeting mode, the case named by its code only")
}

// writeCaseReport composes and writes the case report. Without --map the
// overlay is a gradient × input map (one backward pass) when the model allows
// it; with --map it is the figure already written to --out.
func writeCaseReport(o scoreOptions, paths []string, v *volume.Volume, mf *inference.ModelFolder, sess *inference.Session, res *inference.Result, rep *report.Score) error {
	cr := report.CaseReport{Score: rep, Label: "scan (name not shown: --show-paths shows it)"}
	if o.showPaths {
		cr.Label = filepath.Base(paths[0])
	}
	if o.report.session != "" {
		if err := caseReportReads(o.report, o.showPaths, paths, &cr); err != nil {
			return err
		}
	}
	if o.report.meeting && cr.Reader == "" {
		cr.Label = "case (no code without --session)"
	}
	planes, note, err := caseReportPlanes(o, v, mf, sess, res)
	if err != nil {
		return err
	}
	cr.Planes, cr.PlanesNote = planes, note
	return atomicfile.Write(o.report.file, func(w io.Writer) error { return report.WriteCaseReportPDF(w, cr) })
}

// caseReportReads adds the session's reads of this case and its code.
func caseReportReads(o caseReportOptions, showPaths bool, paths []string, cr *report.CaseReport) error {
	s, err := reading.Open(o.session)
	if err != nil {
		return err
	}
	defer s.Close()
	cases, err := s.Cases()
	if err != nil {
		return err
	}
	abs, _ := filepath.Abs(paths[0])
	var found *reading.SessionCase
	for i, c := range cases {
		if (o.code != "" && c.Code == o.code) || (o.code == "" && c.Source == abs) {
			found = &cases[i]
		}
	}
	if found == nil {
		return inputerr.New(o.session, "no case %s in this session (give --case CODE)", map[bool]string{true: o.code, false: "for this scan"}[o.code != ""])
	}
	if cr.Reads, err = s.CaseReads(found.Code); err != nil {
		return err
	}
	cr.Reader = s.Meta.Reader
	file := ""
	if showPaths {
		file = filepath.Base(paths[0])
	}
	cr.Label = report.CaseLabel(found.Code, file, o.meeting)
	return nil
}

// caseReportPlanes renders the planes: from overlay.png of --map, else with
// a gradient × input overlay, else the scan alone.
func caseReportPlanes(o scoreOptions, v *volume.Volume, mf *inference.ModelFolder, sess *inference.Session, res *inference.Result) (image.Image, string, error) {
	if o.mapMethod != "none" {
		f, err := os.Open(filepath.Join(o.out, report.OverlayFile))
		if err == nil {
			defer f.Close()
			img, _, err := image.Decode(f)
			if err == nil {
				return img, "Planes through the relevance map's peak with the " + o.mapMethod + " map over them (as overlay.png).", nil
			}
		}
	}
	if res.Prepared != nil {
		if ex, err := overlay.New(mf, sess); err == nil {
			m, err := ex.Compute(context.Background(), overlay.GradientInput, res.Prepared.Tensor, overlay.Options{})
			if err == nil {
				onScan, err := m.ToScan(res.Prepared.Transform)
				if err == nil {
					prob := res.Prediction.Probabilities[m.Class]
					img, err := report.OverlayImage(report.OverlayFigure{Scan: v, Map: onScan, At: peakRAS(onScan), Signed: true,
						Units: mapUnits(m), Title: figureTitle(m, overlay.GradientInput, mf, res, prob, false)})
					if err == nil {
						return img, "Planes through the peak of a gradient x input relevance map (red-orange for the class, blue against).", nil
					}
				}
			}
		}
	}
	sc, err := viewer.NewScene(v)
	if err != nil {
		return nil, "", fmt.Errorf("case report planes: %w", err)
	}
	img, err := viewer.Montage(sc, viewer.MontageSpec{At: sc.Center(), Interp: viewer.Linear, Title: []string{"Planes through the scan's centre."}})
	if err != nil {
		return nil, "", fmt.Errorf("case report planes: %w", err)
	}
	return img, "Planes through the scan's centre; no relevance overlay is available for this scan or model.", nil
}
