package app

import (
	"fmt"
	"io"
	"path/filepath"
	"strings"

	"brightfold/internal/report"
)

// caseReport composes the open case's one-page report (report.CaseReport,
// as `brightfold score --report` writes it): the score, the view as the
// PNG export draws it, and, when a reading session is open, the reader's
// reads of the case (reading.Session.CaseReads). In Meeting mode the case
// is named by its list code alone.
func (u *UI) caseReport() (report.CaseReport, error) {
	oc := u.open
	if oc == nil || oc.result == nil || u.cur < 0 {
		return report.CaseReport{}, fmt.Errorf("case report: no scored case is open")
	}
	sess, err := u.model.get()
	if err != nil {
		return report.CaseReport{}, fmt.Errorf("case report: %w", err)
	}
	c := u.cases[u.cur]
	file := ""
	if len(c.Paths) > 0 {
		file = filepath.Base(c.Paths[0])
	}
	cr := report.CaseReport{
		Label: report.CaseLabel(u.shownCode(u.cur), file, u.meeting),
		Score: report.NewScore(file, oc.vol, sess.ModelFolder(), oc.result),
	}
	if img, err := u.exportImage(); err == nil {
		cr.Planes = img
		cr.PlanesNote = "The view as shown in the viewer, with the relevance map as styled there (when one is shown)."
	}
	if rs := u.read.sess; rs != nil {
		if cr.Reads, err = rs.CaseReads(c.Code); err != nil {
			return report.CaseReport{}, err
		}
		cr.Reader = rs.Meta.Reader
	}
	return cr, nil
}

// caseReportName is the report's file name, from the case code (a list
// code in Meeting mode).
func (u *UI) caseReportName() string {
	return strings.ReplaceAll(u.shownCode(u.cur), " ", "-") + "-case-report.pdf"
}

// exportCaseReport writes the open case's one-page report as PDF, like the
// PNG export: a save dialog, or the export folder in Meeting mode.
func (u *UI) exportCaseReport() {
	cr, err := u.caseReport()
	if err != nil {
		u.fail(err)
		return
	}
	u.saveExport(u.caseReportName(), func(w io.Writer) error { return report.WriteCaseReportPDF(w, cr) })
}
