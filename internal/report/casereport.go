package report

import (
	"bytes"
	"fmt"
	"image"
	"image/png"
	"io"
	"strings"
	"time"

	"codeberg.org/go-pdf/fpdf"

	"brightfold/inference"
	"brightfold/inference/fitcheck"
	"brightfold/internal/notice"
)

// CaseRead is one of the reader's reads of the case, for the case report.
type CaseRead struct {
	Condition  string // unaided or aided
	Rating     float64
	Confidence int // 0 for none
	Locked     time.Time
	Amendments int
}

// CaseReport is a one-page PDF of one scored case for a meeting: the planes
// (with the relevance overlay when there is one), the calibrated probability
// with the model's name, version and calibration, the fit check's verdict
// and causes, the reader's reads when a session is open, and the notice.
type CaseReport struct {
	// Label names the case on the page: a case code in Meeting mode. The
	// caller keeps identifiers and paths out of it.
	Label      string
	Score      *Score
	Planes     image.Image // may be nil
	PlanesNote string      // what the picture shows
	Reader     string      // the session's reader, "" without a session
	Reads      []CaseRead
}

// WriteCaseReportPDF writes the case report as a one-page A4 PDF. Nothing
// of Score.Input.Path or Model.Source is printed.
func WriteCaseReportPDF(w io.Writer, c CaseReport) error {
	pdf := fpdf.New("P", "mm", "A4", "")
	pdf.SetAutoPageBreak(false, 0)
	pdf.SetTitle("Case report", true)
	pdf.SetCreator("Brightfold", true)
	tr := pdf.UnicodeTranslatorFromDescriptor("")
	pdf.AddPage()
	pdf.SetFont("Helvetica", "B", 14)
	pdf.Cell(0, 7, tr("Case report: "+c.Label))
	pdf.Ln(8)
	pdf.SetFont("Helvetica", "B", 8.5)
	pdf.MultiCell(0, 4, tr(notice.Full), "", "L", false)
	pdf.Ln(1)
	y := pdf.GetY()
	if c.Planes != nil {
		var buf bytes.Buffer
		if err := png.Encode(&buf, c.Planes); err != nil {
			return fmt.Errorf("case report: %w", err)
		}
		pdf.RegisterImageOptionsReader("planes", fpdf.ImageOptions{ImageType: "PNG"}, &buf)
		b := c.Planes.Bounds()
		wmm, hmm := 186.0, 186.0*float64(b.Dy())/float64(b.Dx())
		if hmm > 120 {
			wmm, hmm = wmm*120/hmm, 120
		}
		pdf.ImageOptions("planes", 12+(186-wmm)/2, y, wmm, hmm, false, fpdf.ImageOptions{ImageType: "PNG"}, 0, "")
		pdf.SetY(y + hmm + 1)
	}
	pdf.SetFont("Helvetica", "I", 8)
	if c.PlanesNote != "" {
		pdf.MultiCell(0, 3.8, tr(c.PlanesNote), "", "L", false)
	}
	pdf.Ln(1)
	for _, sec := range caseReportSections(c) {
		if pdf.GetY() > 265 {
			break
		}
		pdf.SetFont("Helvetica", "B", 10)
		pdf.Cell(0, 5.5, tr(sec.title))
		pdf.Ln(5.5)
		pdf.SetFont("Helvetica", "", 8.5)
		for _, l := range sec.lines {
			if pdf.GetY() > 268 {
				pdf.MultiCell(0, 4, "(more in result.json)", "", "L", false)
				break
			}
			pdf.MultiCell(0, 4, tr(l), "", "L", false)
		}
		pdf.Ln(1)
	}
	pdf.SetY(-16)
	pdf.SetFont("Helvetica", "", 7.5)
	pdf.MultiCell(0, 3.5, tr(notice.Full), "", "C", false)
	if err := pdf.Error(); err != nil {
		return fmt.Errorf("case report: %w", err)
	}
	return pdf.Output(w)
}

type caseReportSection struct {
	title string
	lines []string
}

func caseReportSections(c CaseReport) []caseReportSection {
	s := c.Score
	var out []caseReportSection
	model := caseReportSection{title: "Model and probability"}
	model.lines = append(model.lines, fmt.Sprintf("Model: %s, version %s (model folder sha256 %s).", s.Model.Name, s.Model.Version, caseReportShort(s.Model.SHA256)))
	if p := s.Prediction; p != nil {
		prob := fmt.Sprintf("Calibrated probability of %q: %.2f (prediction: %s).", p.PositiveClass, p.Probability, p.Label)
		if s.OOD.Verdict == fitcheck.OutOfDistribution {
			prob = fmt.Sprintf("Probability of %q as computed: %.2f, UNRELIABLE: the fit check fails, so the scan is unlike the training scans.", p.PositiveClass, p.Probability)
		}
		model.lines = append(model.lines, prob,
			fmt.Sprintf("Calibration: temperature scaling, T = %.3g (uncalibrated probability %.2f).", p.Temperature, p.Uncalibrated))
	} else {
		model.lines = append(model.lines, "No probability: the scan could not be prepared for the model.")
	}
	out = append(out, model)
	fit := caseReportSection{title: "Fit check: " + s.OOD.Verdict}
	fit.lines = caseReportCauses(s.OOD)
	if len(fit.lines) == 0 {
		fit.lines = append(fit.lines, fmt.Sprintf("All %d checks pass: the scan resembles the model's training scans in every respect checked.", len(s.OOD.Checks)))
	}
	out = append(out, fit)
	if c.Reader != "" {
		reads := caseReportSection{title: "Reads by " + c.Reader}
		for _, r := range c.Reads {
			l := fmt.Sprintf("%s read: probability %.0f of 100", caseReportTitle(r.Condition), r.Rating)
			if r.Confidence > 0 {
				l += fmt.Sprintf(", confidence %d of 5", r.Confidence)
			}
			l += ", locked " + r.Locked.UTC().Format("2006-01-02 15:04 UTC")
			if r.Amendments > 0 {
				l += fmt.Sprintf(" (amended %d times; the latest amendment shown)", r.Amendments)
			}
			reads.lines = append(reads.lines, l+".")
		}
		if len(c.Reads) == 0 {
			reads.lines = append(reads.lines, "No read of this case is locked yet.")
		}
		out = append(out, reads)
	}
	return out
}

// caseReportCauses are the causes of the failed checks (inference.GroupCauses,
// as the viewer and `score` show them), each with the checks that saw it and
// their sentences.
func caseReportCauses(o OOD) []string {
	byName := map[string]Check{}
	for _, ch := range o.Checks {
		byName[ch.Name] = ch
	}
	var out []string
	for _, c := range o.Causes {
		tag := ""
		if !c.Required && !c.Consequence {
			tag = " (advisory)"
		}
		out = append(out, fmt.Sprintf("%s%s: %s", c.Title, tag, c.Explanation))
		for _, n := range c.Checks {
			out = append(out, fmt.Sprintf("    %s: %s", inference.CheckTitle(n), byName[n].Explanation))
		}
	}
	if o.Verdict == fitcheck.OutOfDistribution {
		out = append(out, fmt.Sprintf("Fit score %s (the factor by which the scan is beyond the training limits; over 1 is out of distribution).", inference.FormatValue(float64(o.Score))))
	}
	return out
}

func caseReportShort(sha string) string {
	if len(sha) > 16 {
		return sha[:16] + "..."
	}
	return sha
}

func caseReportTitle(s string) string {
	if s == "" {
		return s
	}
	return strings.ToUpper(s[:1]) + s[1:]
}
