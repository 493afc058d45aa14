package cohort

import (
	"bytes"
	"fmt"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"codeberg.org/go-pdf/fpdf"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"brightfold/internal/atomicfile"
	"brightfold/internal/notice"
)

// WriteAudit writes audit.json, audit.tsv and audit.pdf into out.
func WriteAudit(out string, a *Audit) error {
	p := func(n string) string { return filepath.Join(out, n) }
	removeTemporaries(p(AuditJSON), p(AuditTSV), p(AuditPDF))
	if err := writeJSON(p(AuditJSON), a); err != nil {
		return err
	}
	if err := atomicfile.Write(p(AuditTSV), func(w io.Writer) error { return writeAuditTSV(w, a) }); err != nil {
		return err
	}
	rel, err := reliabilityPNG(a)
	if err != nil {
		return fmt.Errorf("reliability diagram: %w", err)
	}
	forest, err := forestPNG(a)
	if err != nil {
		return fmt.Errorf("forest plot: %w", err)
	}
	return atomicfile.Write(p(AuditPDF), func(w io.Writer) error { return writeAuditPDF(w, a, rel, forest) })
}

func num(x float64) string {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return "n/a"
	}
	return strconv.FormatFloat(x, 'g', 6, 64)
}

// writeAuditTSV writes the audit in long form: one figure per row.
func writeAuditTSV(w io.Writer, a *Audit) error {
	fmt.Fprintln(w, "section\tby\tgroup\tfigure\tvalue\tlo\thi\tinterval\tn\tn_positive\tn_negative\tunder_20_per_class\tnotice")
	row := func(section, by, group, fig string, v Interval, m *Metrics) {
		n, np, nn, small := "n/a", "n/a", "n/a", "n/a"
		if m != nil {
			n, np, nn, small = strconv.Itoa(m.N), strconv.Itoa(m.Positives), strconv.Itoa(m.Negatives), strconv.FormatBool(m.Small)
		}
		fmt.Fprintf(w, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", section, by, tsvCell(group), fig,
			num(float64(v.Value)), num(float64(v.Lo)), num(float64(v.Hi)), tsvCell(v.Method), n, np, nn, small, notice.Full)
	}
	metricRows := func(section, by, group string, m *Metrics) {
		row(section, by, group, "auroc", m.AUROC, m)
		row(section, by, group, "sensitivity", m.Sensitivity, m)
		row(section, by, group, "specificity", m.Specificity, m)
		row(section, by, group, "ece", m.ECE, m)
		row(section, by, group, "brier", m.Brier, m)
	}
	metricRows("overall", "all", "all", &a.Overall)
	c := a.Calibration
	nan := math.NaN()
	row("calibration", "all", "all", "calibration_intercept", iv(float64(c.Intercept), nan, nan, ""), &a.Overall)
	row("calibration", "all", "all", "calibration_slope", iv(float64(c.Slope), nan, nan, ""), &a.Overall)
	row("calibration", "all", "all", "closed_test_p_recalibration_vs_original", iv(float64(c.PRecalVsOrig), nan, nan, ""), &a.Overall)
	row("calibration", "all", "all", "closed_test_p_recalibration_vs_intercept", iv(float64(c.PRecalVsInt), nan, nan, "recommended: "+c.Recalibration), &a.Overall)
	for i := range a.Subgroups {
		s := &a.Subgroups[i]
		metricRows("subgroup", strings.ReplaceAll(s.By, " ", "_"), s.Name, &s.Metrics)
	}
	if cv := a.Covariates; cv != nil {
		row("confound", "covariates_only", strings.Join(cv.Covariates, "+"), "cross_validated_auroc", iv(float64(cv.AUROC), nan, nan, fmt.Sprintf("%d-fold", cv.Folds)), nil)
	}
	for _, p := range a.Partial {
		row("confound", "partial_confounder_test", p.Covariate, "r2", iv(float64(p.R2), nan, nan, ""), nil)
		row("confound", "partial_confounder_test", p.Covariate, "p", iv(float64(p.P), nan, nan, fmt.Sprintf("%d permutations", p.Perms)), nil)
	}
	for _, s := range a.Sites {
		row("fit_check", "site", s.Site, "out_of_distribution_rate", s.Rate, nil)
	}
	return nil
}

// reliabilityPNG draws the reliability diagram: observed rate against mean
// predicted probability per bin, with the diagonal of perfect calibration.
func reliabilityPNG(a *Audit) ([]byte, error) {
	p := plot.New()
	p.Title.Text = fmt.Sprintf("Reliability diagram (%d labelled cases, %d bins)", a.Labelled, auditECEBins)
	p.X.Label.Text = "mean predicted probability in the bin"
	p.Y.Label.Text = "observed rate of the pattern"
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = 0, 1, 0, 1
	diag, _ := plotter.NewLine(plotter.XYs{{X: 0, Y: 0}, {X: 1, Y: 1}})
	diag.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
	diag.Color = color.Gray{Y: 120}
	var pts plotter.XYs
	for _, b := range a.Calibration.Reliability {
		if b.N > 0 {
			pts = append(pts, plotter.XY{X: float64(b.MeanP), Y: float64(b.Observed)})
		}
	}
	p.Add(diag)
	if len(pts) > 0 {
		line, sc, err := plotter.NewLinePoints(pts)
		if err != nil {
			return nil, err
		}
		line.Color = color.RGBA{R: 20, G: 90, B: 160, A: 255}
		sc.Color, sc.Shape, sc.Radius = line.Color, draw.CircleGlyph{}, vg.Points(3)
		p.Add(line, sc)
	}
	p.Legend.Add("perfect calibration", diag)
	p.Legend.Top, p.Legend.Left = true, true
	return plotBytes(p, 12*vg.Centimeter, 10*vg.Centimeter)
}

// forestPNG draws each subgroup's AUROC with its DeLong interval; marked
// subgroups (under 20 cases of a class) are grey and starred.
func forestPNG(a *Audit) ([]byte, error) {
	p := plot.New()
	p.Title.Text = "AUROC by subgroup with DeLong 95 % intervals"
	p.X.Label.Text = "AUROC (0.5 = chance)"
	p.X.Min, p.X.Max = 0, 1
	rows := append([]Subgroup{{By: "all", Name: "all cases", Metrics: a.Overall}}, a.Subgroups...)
	names := make([]string, len(rows))
	for i, s := range rows {
		y := float64(len(rows) - 1 - i)
		names[len(rows)-1-i] = fmt.Sprintf("%s: %s (n=%d)", s.By, s.Name, s.N)
		if s.Small {
			names[len(rows)-1-i] += " *"
		}
		col := color.Color(color.RGBA{R: 20, G: 90, B: 160, A: 255})
		if s.Small {
			col = color.Gray{Y: 150}
		}
		v, lo, hi := float64(s.AUROC.Value), float64(s.AUROC.Lo), float64(s.AUROC.Hi)
		if math.IsNaN(v) {
			continue
		}
		seg, _ := plotter.NewLine(plotter.XYs{{X: lo, Y: y}, {X: hi, Y: y}})
		seg.Color, seg.Width = col, vg.Points(1.5)
		pt, _ := plotter.NewScatter(plotter.XYs{{X: v, Y: y}})
		pt.Color, pt.Shape, pt.Radius = col, draw.BoxGlyph{}, vg.Points(3)
		p.Add(seg, pt)
	}
	chance, _ := plotter.NewLine(plotter.XYs{{X: 0.5, Y: -0.5}, {X: 0.5, Y: float64(len(rows)) - 0.5}})
	chance.Dashes, chance.Color = []vg.Length{vg.Points(3), vg.Points(3)}, color.Gray{Y: 120}
	p.Add(chance)
	p.NominalY(names...)
	h := vg.Length(len(rows))*0.7*vg.Centimeter + 3*vg.Centimeter
	return plotBytes(p, 16*vg.Centimeter, h)
}

func plotBytes(p *plot.Plot, w, h vg.Length) ([]byte, error) {
	wt, err := p.WriterTo(w, h, "png")
	if err != nil {
		return nil, err
	}
	var buf bytes.Buffer
	if _, err := wt.WriteTo(&buf); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

// writeAuditPDF lays out the audit: the notice on every page, each section
// with its plain sentence, the figures and the methods.
func writeAuditPDF(w io.Writer, a *Audit, reliability, forest []byte) error {
	pdf := fpdf.New("P", "mm", "A4", "")
	pdf.SetCatalogSort(true) // images and fonts in a fixed order: the same audit, the same bytes
	if t, ok := sourceDate(); ok {
		pdf.SetCreationDate(t)
		pdf.SetModificationDate(t)
	}
	tr := pdf.UnicodeTranslatorFromDescriptor("")
	pdf.SetMargins(18, 20, 18)
	pdf.SetAutoPageBreak(true, 20)
	pdf.SetHeaderFunc(func() {
		pdf.SetFont("Helvetica", "B", 8)
		pdf.SetTextColor(150, 20, 20)
		pdf.MultiCell(0, 4, tr(notice.Full), "", "L", false)
		pdf.SetTextColor(0, 0, 0)
		pdf.Ln(2)
	})
	pdf.SetFooterFunc(func() {
		pdf.SetY(-14)
		pdf.SetFont("Helvetica", "", 7)
		pdf.CellFormat(0, 4, tr(fmt.Sprintf("%s  Page %d", notice.Short, pdf.PageNo())), "", 0, "C", false, 0, "")
	})
	pdf.AddPage()
	h1 := func(s string) {
		pdf.Ln(3)
		pdf.SetFont("Helvetica", "B", 13)
		pdf.MultiCell(0, 6, tr(s), "", "L", false)
		pdf.SetFont("Helvetica", "", 10)
	}
	para := func(s string) { pdf.MultiCell(0, 5, tr(s), "", "L", false); pdf.Ln(1) }
	img := func(name string, b []byte, wmm float64) {
		opt := fpdf.ImageOptions{ImageType: "PNG", ReadDpi: false}
		pdf.RegisterImageOptionsReader(name, opt, bytes.NewReader(b))
		pdf.ImageOptions(name, pdf.GetX(), pdf.GetY(), wmm, 0, true, opt, 0, "")
	}
	pdf.SetFont("Helvetica", "B", 16)
	pdf.MultiCell(0, 8, tr("Site audit of "+a.Model.Name+" "+a.Model.Version), "", "L", false)
	pdf.SetFont("Helvetica", "", 10)
	para(fmt.Sprintf("Model folder sha256 %s. %d cases, %d scored, %d labelled and scored. All figures are in-sample on this cohort's labelled, scored cases, with 95 %% intervals.", a.Model.SHA256, a.Cases, a.Scored, a.Labelled))

	h1("Discrimination")
	para(a.Discrimination)
	o := a.Overall
	para(fmt.Sprintf("AUROC %.3f (DeLong 95 %% CI %.3f-%.3f). Sensitivity at 0.5: %.3f (Wilson %.3f-%.3f). Specificity at 0.5: %.3f (Wilson %.3f-%.3f). n = %d (%d with the pattern, %d without).",
		o.AUROC.Value, o.AUROC.Lo, o.AUROC.Hi, o.Sensitivity.Value, o.Sensitivity.Lo, o.Sensitivity.Hi, o.Specificity.Value, o.Specificity.Lo, o.Specificity.Hi, o.N, o.Positives, o.Negatives))

	h1("Calibration")
	c := a.Calibration
	para(c.Sentence)
	para(fmt.Sprintf("ECE (%d bins) %.3f (bootstrap 95 %% CI %.3f-%.3f). Brier %.3f (%.3f-%.3f). Calibration intercept %.3f, slope %.3f. Closed test: recalibration vs original p = %.3g, vs intercept update p = %.3g; recommended recalibration: %s.",
		auditECEBins, c.ECE.Value, c.ECE.Lo, c.ECE.Hi, c.Brier.Value, c.Brier.Lo, c.Brier.Hi, c.Intercept, c.Slope, c.PRecalVsOrig, c.PRecalVsInt, c.Recalibration))
	para("Figure 1. Reliability diagram: observed rate of the pattern against the mean predicted probability in each bin; the dashed diagonal is perfect calibration.")
	img("reliability", reliability, 120)

	pdf.AddPage()
	h1("Subgroups")
	para(a.SubgroupNote)
	para("Figure 2. Forest plot: AUROC per site, sex and age band with DeLong 95 % intervals; * marks subgroups under 20 cases per class (grey).")
	img("forest", forest, 160)
	pdf.SetFont("Helvetica", "", 8)
	for _, s := range a.Subgroups {
		mark := ""
		if s.Small {
			mark = " *"
		}
		pdf.MultiCell(0, 4, tr(fmt.Sprintf("%s %s%s: n=%d (%d/%d); AUROC %s [%s-%s]; sens %s [%s-%s]; spec %s [%s-%s]; ECE %s; Brier %s",
			s.By, s.Name, mark, s.N, s.Positives, s.Negatives, f3(s.AUROC.Value), f3(s.AUROC.Lo), f3(s.AUROC.Hi),
			f3(s.Sensitivity.Value), f3(s.Sensitivity.Lo), f3(s.Sensitivity.Hi), f3(s.Specificity.Value), f3(s.Specificity.Lo), f3(s.Specificity.Hi),
			f3(s.ECE.Value), f3(s.Brier.Value))), "", "L", false)
	}
	pdf.SetFont("Helvetica", "", 10)

	h1("Confounds")
	if cv := a.Covariates; cv != nil {
		para(fmt.Sprintf("Covariates only (%s, n = %d, %d-fold cross-validated AUROC %s). %s", strings.Join(cv.Covariates, ", "), cv.N, cv.Folds, f3(cv.AUROC), cv.Sentence))
	}
	for _, p := range a.Partial {
		para(fmt.Sprintf("Partial confounder test, %s (n = %d, R2 %.3f, p = %.3g, %d permutations). %s", p.Covariate, p.N, p.R2, p.P, p.Perms, p.Sentence))
	}
	h1("Fit check by site")
	for _, s := range a.Sites {
		para(fmt.Sprintf("%s Out-of-distribution rate %.2f (Wilson 95 %% CI %.2f-%.2f).", s.Sentence, s.Rate.Value, s.Rate.Lo, s.Rate.Hi))
	}
	h1("Methods")
	for _, m := range a.Method {
		para("- " + m)
	}
	return pdf.Output(w)
}

func f3[T ~float64](x T) string {
	if math.IsNaN(float64(x)) {
		return "n/a"
	}
	return fmt.Sprintf("%.3f", float64(x))
}

// sourceDate is the time of SOURCE_DATE_EPOCH when set (the
// reproducible-builds convention), so that the same audit gives the same
// PDF bytes; otherwise the PDF carries the time it was written.
func sourceDate() (time.Time, bool) {
	s, err := strconv.ParseInt(os.Getenv("SOURCE_DATE_EPOCH"), 10, 64)
	if err != nil {
		return time.Time{}, false
	}
	return time.Unix(s, 0).UTC(), true
}
