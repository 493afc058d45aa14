package study

import (
	"bytes"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/inference"
	"brightfold/inference/fitcheck"
	"brightfold/internal/notice"
	"brightfold/internal/phantom"
	"brightfold/internal/refcheck"
	"brightfold/internal/report"
)

func testCard() *inference.Card {
	return &inference.Card{Classes: []string{"no_pattern", "atrophy_pattern"}, PositiveClass: "atrophy_pattern",
		Outputs:     inference.OutputSpec{Activation: inference.ActivationSoftmax},
		Calibration: inference.Calibration{Temperature: 2}}
}

// handCases are scored cases made by hand: eight in-distribution cases
// (logits (0, d), labels as below) and three of each of two shifts, one of
// them not prepared (the model not run; only the checks that need no model).
func handCases(card *inference.Card) []Case {
	ds := []float64{-2, -1, 0.5, 1, 2, 3, -0.5, 0}
	labels := []int{0, 0, 1, 0, 1, 1, 1, 0}
	fit := []float64{0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 1.2}
	var cs []Case
	mk := func(i int, sh phantom.Shift, label int, d, score float64) Case {
		z := []float64{0, d}
		c := Case{ID: phantom.CaseID(i), Index: i, Shift: sh, Label: label, Logits: z,
			Probability:  inference.ClassProbabilities(card, z, card.Calibration.Temperature)[1],
			Uncalibrated: inference.ClassProbabilities(card, z, 1)[1],
			FitScore:     score, Verdict: fitcheck.InDistribution,
			Severities: map[string]float64{inference.CheckNoise: score, inference.CheckModality: 0.5}}
		if score > 1 {
			c.Verdict, c.Failed = fitcheck.OutOfDistribution, []string{inference.CheckNoise}
		}
		return c
	}
	for i := range ds {
		cs = append(cs, mk(i, phantom.ShiftNone, labels[i], ds[i], fit[i]))
	}
	for k, s := range []float64{0.9, 1.5, 3} {
		cs = append(cs, mk(8+k, phantom.ShiftT2, 0, 0.1*float64(k), s))
	}
	ref := Case{ID: phantom.CaseID(11), Index: 11, Shift: phantom.ShiftCT, NotPrepared: "x.nii: cannot prepare the scan",
		FitScore: 2, Verdict: fitcheck.OutOfDistribution, Failed: []string{inference.CheckPreparation},
		Severities: map[string]float64{inference.CheckModality: 0.5, inference.CheckPreparation: 2}}
	cs = append(cs, ref, mk(12, phantom.ShiftCT, 0, 1, 2), mk(13, phantom.ShiftCT, 0, -1, 0.5))
	return cs
}

// TestComputeHandExample checks the figures on hand-made scores. AUROC is
// the probability that a random positive outscores a random negative, ties
// counting half (Hanley & McNeil 1982; sklearn's roc_auc_score):
//   - held-out: positives d = 0.5, 2, 3, −0.5 against negatives −2, −1, 1, 0
//     win 3 + 4 + 4 + 2 = 13 of 16 pairs → 0.8125;
//   - t2: fit scores 0.9, 1.5, 3 against the eight in-distribution scores
//     (0.2 … 0.8, 1.2) win 7 + 8 + 8 = 23 of 24 pairs;
//   - ct: 2 (not prepared), 2 and 0.5 win 8 + 8 + 3.5 (one tie) = 19.5 of 24;
//   - the modality severity is 0.5 everywhere: all ties, 0.5.
//
// One in-distribution case (fit score 1.2) is a false alarm: 1/8.
func TestComputeHandExample(t *testing.T) {
	card := testCard()
	f := Compute(card, handCases(card))
	near := func(what string, got, want float64) {
		t.Helper()
		if math.Abs(float64(got)-want) > 1e-12 {
			t.Errorf("%s = %v, want %v", what, float64(got), want)
		}
	}
	near("held-out AUROC", float64(f.HeldOut.AUROC), 13.0/16)
	if f.HeldOut.N != 8 || f.HeldOut.Positives != 4 {
		t.Errorf("held-out n %d positives %d, want 8 and 4", f.HeldOut.N, f.HeldOut.Positives)
	}
	near("false-alarm rate", float64(f.FalseAlarms.Rate), 1.0/8)
	if f.FalseAlarms.FailedChecks[inference.CheckNoise] != 1 {
		t.Errorf("false alarms' failed checks %v", f.FalseAlarms.FailedChecks)
	}
	if len(f.Shifts) != 2 || f.Shifts[0].Shift != phantom.ShiftT2 || f.Shifts[1].Shift != phantom.ShiftCT {
		t.Fatalf("shifts %+v", f.Shifts)
	}
	near("t2 AUROC", float64(f.Shifts[0].AUROC), 23.0/24)
	near("ct AUROC", float64(f.Shifts[1].AUROC), 19.5/24)
	near("t2 flag rate", float64(f.Shifts[0].FlagRate), 2.0/3)
	near("ct flag rate", float64(f.Shifts[1].FlagRate), 2.0/3)
	if f.Shifts[1].NotPrepared != 1 || f.Shifts[1].FailedChecks[inference.CheckPreparation] != 1 {
		t.Errorf("ct not prepared %d, failed %v", f.Shifts[1].NotPrepared, f.Shifts[1].FailedChecks)
	}
	near("t2 modality-check AUROC", float64(f.Shifts[0].CheckAUROC[inference.CheckModality]), 0.5)
	// the noise severity equals the fit score where the model ran; the ct
	// check AUROC leaves out the case without it: 8 + 3.5 of 16
	near("ct noise-check AUROC", float64(f.Shifts[1].CheckAUROC[inference.CheckNoise]), 11.5/16)
	if f.Calibration.Temperature != 2 || f.Calibration.Bins != 15 || !(f.Calibration.ECEBefore >= 0) {
		t.Errorf("calibration %+v", f.Calibration)
	}
}

// TestHandExampleAgreesWithSklearn writes the hand-made cases to the CSV
// and has Debian's sklearn (roc_auc_score) and numpy/scipy (ECE, Guo et
// al. 2017 Eq. 3) recompute every figure; a figure changed afterwards must
// be caught.
func TestHandExampleAgreesWithSklearn(t *testing.T) {
	refcheck.PythonModule(t, "sklearn")
	refcheck.PythonModule(t, "scipy")
	card := testCard()
	cs := handCases(card)
	ev := &Evaluation{Cases: cs, Checks: CheckNames(cs), Figures: Compute(card, cs)}
	p := filepath.Join(t.TempDir(), CasesFile)
	if err := WriteCasesCSV(p, card, ev); err != nil {
		t.Fatal(err)
	}
	ref, err := CheckWithSklearn(p)
	if err != nil {
		t.Fatal(err)
	}
	a := Compare(ev.Figures, ref)
	if !a.OK() {
		t.Fatalf("disagreement with sklearn: %v", a.Mismatches)
	}
	// 1 held-out + 2 shifts × (1 fit score + 3 checks; preparation has no
	// in-distribution case, so neither side can compute it)
	if a.AUROCs != 9 || ref.Rows != len(cs) {
		t.Errorf("compared %d AUROCs over %d rows, want 9 over %d", a.AUROCs, ref.Rows, len(cs))
	}
	t.Logf("%s: %d AUROCs, %d other figures, largest difference %.2g", a.Reference, a.AUROCs, a.Others, a.MaxAbsDiff)
	bad := ev.Figures
	bad.Shifts = append([]ShiftFigure(nil), bad.Shifts...)
	bad.Shifts[1].AUROC += 1e-6
	bad.Calibration.ECEAfter += 1e-6
	if m := Compare(bad, ref).Mismatches; len(m) != 2 {
		t.Errorf("altered figures gave mismatches %v, want two", m)
	}
}

// TestOutputsCarryNotice: the CSV (every row), JSON, Markdown and table
// carry notice.Full; the document update keeps the text around the block.
func TestOutputsCarryNotice(t *testing.T) {
	card := testCard()
	cs := handCases(card)
	ev := &Evaluation{Cases: cs, Checks: CheckNames(cs), Figures: Compute(card, cs),
		RealScans: []RealResult{{Scan: RealScan{Name: "a.nii", From: "nibabel"}, Status: StatusScored, Verdict: fitcheck.OutOfDistribution,
			Failed: []FailedCheck{{Name: inference.CheckSlices, Explanation: "The scan has only 3 slices."}}},
			{Scan: RealScan{Name: "b.dcm", From: "pydicom"}, Status: StatusNotPrepared, Verdict: fitcheck.OutOfDistribution, FitScore: 2,
				Failed: []FailedCheck{{Name: inference.CheckPreparation, Value: report.Number(math.NaN()), Explanation: "The scan could not be prepared."}}}}}
	dir := t.TempDir()
	if err := WriteOutputs(dir, card, ev); err != nil {
		t.Fatal(err)
	}
	csvText, _ := os.ReadFile(filepath.Join(dir, CasesFile))
	lines := strings.Split(strings.TrimSpace(string(csvText)), "\n")
	if len(lines) != len(cs)+1 {
		t.Fatalf("CSV has %d lines, want %d", len(lines), len(cs)+1)
	}
	for i, l := range lines[1:] {
		if !strings.HasSuffix(l, notice.Full) {
			t.Errorf("CSV row %d lacks the notice: %s", i+1, l)
		}
	}
	for _, name := range []string{JSONFile, MarkdownFile} {
		b, err := os.ReadFile(filepath.Join(dir, name))
		if err != nil || !bytes.Contains(b, []byte(notice.Full)) {
			t.Errorf("%s lacks the notice (%v)", name, err)
		}
	}
	var tab bytes.Buffer
	WriteTable(&tab, ev)
	if s := tab.String(); !strings.HasPrefix(s, notice.Full) || !strings.HasSuffix(strings.TrimSpace(s), notice.Full) ||
		!strings.Contains(s, "The scan has only 3 slices.") {
		t.Errorf("table lacks the notice first and last or a reason:\n%s", s)
	}
	doc := filepath.Join(dir, "doc.md")
	os.WriteFile(doc, []byte("# Title\n\nbefore\n"+BlockBegin+"\nold figures\n"+BlockEnd+"\nafter\n"), 0o644)
	if err := UpdateDocument(doc, ev); err != nil {
		t.Fatal(err)
	}
	b, _ := os.ReadFile(doc)
	s := string(b)
	if strings.Contains(s, "old figures") || !strings.Contains(s, "before\n"+BlockBegin) || !strings.HasSuffix(s, BlockEnd+"\nafter\n") ||
		!strings.Contains(s, notice.Full) {
		t.Errorf("updated document:\n%s", s)
	}
	os.WriteFile(doc, []byte("no markers\n"), 0o644)
	if err := UpdateDocument(doc, ev); err == nil || !strings.Contains(err.Error(), doc) {
		t.Errorf("document without markers: %v", err)
	}
}

// TestMarkdownRealScans: a file that cannot be read and an in-distribution real scan are
// stated plainly in the Markdown, with the notice.
func TestMarkdownRealScans(t *testing.T) {
	ev := &Evaluation{RealScans: []RealResult{
		{Scan: RealScan{Name: "b.dcm", From: "pydicom"}, Status: StatusNotLoaded, Error: "b.dcm: not a DICOM file"},
		{Scan: RealScan{Name: "c.nii", From: "nibabel"}, Status: StatusScored, Verdict: fitcheck.InDistribution}}}
	md := Markdown(ev)
	for _, want := range []string{"b.dcm: not a DICOM file", "in-distribution (**not flagged**)", notice.Full} {
		if !strings.Contains(md, want) {
			t.Errorf("Markdown lacks %q", want)
		}
	}
}
