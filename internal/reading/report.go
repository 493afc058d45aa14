package reading

import (
	"bytes"
	"encoding/csv"
	"fmt"
	"image/color"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"

	"codeberg.org/go-pdf/fpdf"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"

	"brightfold/internal/notice"
)

// readerStudyPalette colours the readers' curves (chosen for contrast on white).
var readerStudyPalette = []color.RGBA{
	{0x1b, 0x6c, 0xa8, 0xff}, {0xc2, 0x4d, 0x1f, 0xff}, {0x3a, 0x8f, 0x3a, 0xff},
	{0x8a, 0x3f, 0x9e, 0xff}, {0x9c, 0x7a, 0x12, 0xff}, {0x2a, 0x9d, 0x9a, 0xff},
	{0x60, 0x60, 0x60, 0xff}, {0xb8, 0x2e, 0x6a, 0xff},
}

// ReaderStudyPDF writes the reader-study report: the method, the test, the
// difference, each condition's mean AUROC, per-reader AUROCs, the ROC curves
// of each reader in each condition (and the model alone), and the notice.
func ReaderStudyPDF(w io.Writer, a *Analysis) error {
	pdf := fpdf.New("P", "mm", "A4", "")
	pdf.SetTitle("Reader study", true)
	pdf.SetCreator("Brightfold", true)
	tr := pdf.UnicodeTranslatorFromDescriptor("")
	pdf.SetFooterFunc(func() {
		pdf.SetY(-14)
		pdf.SetFont("Helvetica", "", 7.5)
		pdf.MultiCell(0, 3.5, tr(notice.Full), "", "C", false)
	})
	pdf.AddPage()
	pdf.SetFont("Helvetica", "B", 14)
	pdf.Cell(0, 8, "Reader study: AUROC by condition")
	pdf.Ln(9)
	pdf.SetFont("Helvetica", "", 9)
	pdf.MultiCell(0, 4.5, tr(notice.Full), "", "L", false)
	pdf.Ln(2)
	for _, line := range ReaderStudyLines(a) {
		pdf.MultiCell(0, 4.5, tr(line), "", "L", false)
	}
	pdf.Ln(2)
	var captions []string
	for i, cond := range readerStudyPanels(a) {
		img, err := readerStudyROC(a, cond)
		if err != nil {
			return err
		}
		name := "roc-" + cond
		pdf.RegisterImageOptionsReader(name, fpdf.ImageOptions{ImageType: "PNG"}, bytes.NewReader(img))
		if i%2 == 0 && i > 0 {
			pdf.SetY(pdf.GetY() + 92)
		}
		if i%2 == 0 && pdf.GetY() > 190 {
			pdf.AddPage()
		}
		pdf.ImageOptions(name, 12+float64(i%2)*94, pdf.GetY(), 90, 0, false, fpdf.ImageOptions{ImageType: "PNG"}, 0, "")
		captions = append(captions, readerStudyCaption(a, cond))
	}
	if len(captions) > 0 {
		pdf.SetY(pdf.GetY() + 92)
		pdf.SetFont("Helvetica", "", 8)
		for _, c := range captions {
			pdf.MultiCell(0, 4, tr(c), "", "L", false)
		}
	}
	if err := pdf.Error(); err != nil {
		return fmt.Errorf("reader study PDF: %w", err)
	}
	return pdf.Output(w)
}

// readerStudyCaption names a panel's curves in text (the plot itself is an image).
func readerStudyCaption(a *Analysis, cond string) string {
	var rs []string
	for _, r := range a.Readers {
		if r.Condition == cond {
			rs = append(rs, fmt.Sprintf("%s (AUROC %.3f)", r.Reader, r.AUC))
		}
	}
	return "ROC curves, " + cond + ": empirical curves on the analysed cases of " + strings.Join(rs, ", ") + "; the dashed line is chance."
}

// readerStudyPanels is one ROC panel per condition, plus the model alone when present.
func readerStudyPanels(a *Analysis) []string {
	panels := append([]string{}, a.Table.Conditions...)
	if a.Model != nil {
		panels = append(panels, "model alone")
	}
	return panels
}

// ReaderStudyLines is the analysis as lines of text (the CLI prints them too).
func ReaderStudyLines(a *Analysis) []string {
	c := a.Cases
	lines := []string{
		"Method: " + a.Method + ".",
		fmt.Sprintf("Cases: %d analysed (%d positive, %d negative); %d dropped as not read by every reader in every condition, %d without truth.",
			c.Analysed, c.Positive, c.Negative, c.Incomplete, c.NoTruth),
	}
	if t := a.Test; t != nil {
		switch t.Statistic {
		case "F":
			lines = append(lines, fmt.Sprintf("Test of equal AUROCs: F = %.4f, df = %.0f and %.2f, p = %.4g.", *t.F, *t.DF1, *t.DF2, t.P))
		case "chi2":
			lines = append(lines, fmt.Sprintf("Test of equal AUROCs: chi-square = %.4f, df = %.0f, p = %.4g.", *t.Chi2, *t.DF1, t.P))
		case "z":
			lines = append(lines, fmt.Sprintf("Test of equal AUROCs: z = %.4f, p = %.4g.", *t.Z, t.P))
		}
	}
	for _, d := range a.Differences {
		lines = append(lines, fmt.Sprintf("Difference %s: %.4f (SE %.4f), 95%% CI %.4f to %.4f, p = %.4g.", d.Of, d.Estimate, d.SE, d.CI95[0], d.CI95[1], d.P))
	}
	if len(a.Differences) == 0 && a.Difference != nil {
		d := a.Difference
		lines = append(lines, fmt.Sprintf("Difference %s: %.4f (SE %.4f), 95%% CI %.4f to %.4f, p = %.4g.", d.Of, d.Estimate, d.SE, d.CI95[0], d.CI95[1], d.P))
	}
	for _, cd := range a.Conditions {
		s := fmt.Sprintf("Condition %s: mean AUROC %.4f", cd.Name, cd.AUC)
		if cd.CI95 != nil {
			s += fmt.Sprintf(", 95%% CI %.4f to %.4f", cd.CI95[0], cd.CI95[1])
		}
		lines = append(lines, s+".")
	}
	var rs []string
	for _, r := range a.Readers {
		rs = append(rs, fmt.Sprintf("%s/%s %.4f", r.Reader, r.Condition, r.AUC))
	}
	lines = append(lines, "Reader AUROCs (empirical): "+strings.Join(rs, "; ")+".")
	if m := a.Model; m != nil {
		lines = append(lines, fmt.Sprintf("Model alone on the %d cases where it was shown: AUROC %.4f, 95%% CI %.4f to %.4f (DeLong).", m.Cases, m.AUC, m.CI95[0], m.CI95[1]))
	}
	for _, t := range a.Threshold50 {
		lines = append(lines, fmt.Sprintf("At a rating of 50: %s/%s sensitivity %.3f (%.3f-%.3f), specificity %.3f (%.3f-%.3f), Wilson 95%% CIs.",
			t.Reader, t.Condition, t.Sensitivity, t.SensCI95[0], t.SensCI95[1], t.Specificity, t.SpecCI95[0], t.SpecCI95[1]))
	}
	for _, m := range a.Moves {
		lines = append(lines, fmt.Sprintf("Aided read of %s moved toward the truth in %d cases, away in %d, unchanged in %d.", m.Reader, m.Toward, m.Away, m.Unchanged))
	}
	for _, t := range a.TimePerCase {
		lines = append(lines, fmt.Sprintf("Time per case, %s: median %.1f s, mean %.1f s over %d reads.", t.Condition, t.MedianSeconds, t.MeanSeconds, t.Reads))
	}
	for _, w := range a.Warnings {
		lines = append(lines, "Warning: "+w+".")
	}
	return lines
}

// readerStudyROC draws the ROC curves of every reader in one condition as a PNG.
func readerStudyROC(a *Analysis, cond string) ([]byte, error) {
	p := plot.New()
	p.Title.Text = "ROC curves, " + cond
	p.X.Label.Text = "1 - specificity (false-positive fraction)"
	p.Y.Label.Text = "sensitivity (true-positive fraction)"
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = 0, 1, 0, 1
	p.Legend.Top, p.Legend.Left = false, false
	chance := plotter.NewFunction(func(x float64) float64 { return x })
	chance.Color = color.RGBA{0xaa, 0xaa, 0xaa, 0xff}
	chance.Dashes = []vg.Length{vg.Points(3), vg.Points(3)}
	p.Add(chance)
	var keys []string
	for k := range a.Curves {
		if strings.HasSuffix(k, "\x00"+cond) {
			keys = append(keys, k)
		}
	}
	sort.Strings(keys)
	aucs := map[string]float64{}
	for _, r := range a.Readers {
		aucs[r.Reader+"\x00"+r.Condition] = r.AUC
	}
	for i, k := range keys {
		pts := a.Curves[k]
		xy := make(plotter.XYs, len(pts))
		for j, q := range pts {
			xy[j].X, xy[j].Y = q.FPR, q.TPR
		}
		line, err := plotter.NewLine(xy)
		if err != nil {
			return nil, fmt.Errorf("ROC plot: %w", err)
		}
		line.Color = readerStudyPalette[i%len(readerStudyPalette)]
		line.Width = vg.Points(1.4)
		p.Add(line)
		p.Legend.Add(fmt.Sprintf("%s (AUROC %.3f)", strings.SplitN(k, "\x00", 2)[0], aucs[k]), line)
	}
	c := vgimg.New(5*vg.Inch, 5*vg.Inch)
	p.Draw(draw.New(c))
	var buf bytes.Buffer
	if _, err := (vgimg.PngCanvas{Canvas: c}).WriteTo(&buf); err != nil {
		return nil, fmt.Errorf("ROC plot: %w", err)
	}
	return buf.Bytes(), nil
}

// WriteCaseTable writes reads_by_case.csv: one row per analysed case (code
// and truth), one column per reader and condition, the model's probability
// when shown, and the notice in the last column.
func WriteCaseTable(w io.Writer, a *Analysis) error {
	t := a.Table
	cw := csv.NewWriter(w)
	head := []string{"case", "truth"}
	for _, c := range t.Conditions {
		for _, r := range t.Readers {
			head = append(head, r+"|"+c)
		}
	}
	if t.Model != nil {
		head = append(head, ModelReader)
	}
	if err := cw.Write(append(head, "notice")); err != nil {
		return err
	}
	for k, code := range t.Cases {
		row := []string{code, "0"}
		if t.Truth[k] {
			row[1] = "1"
		}
		for i := range t.Conditions {
			for j := range t.Readers {
				row = append(row, strconv.FormatFloat(t.Ratings[i][j][k], 'g', -1, 64))
			}
		}
		if t.Model != nil {
			m := ""
			if !math.IsNaN(t.Model[k]) {
				m = strconv.FormatFloat(t.Model[k], 'g', -1, 64)
			}
			row = append(row, m)
		}
		if err := cw.Write(append(row, notice.Full)); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}
