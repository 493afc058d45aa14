package study

import (
	"encoding/csv"
	"io"
	"strconv"
	"strings"

	"brightfold/inference"
	"brightfold/internal/atomicfile"
	"brightfold/internal/notice"
)

// CasesFile is the per-case CSV an evaluation writes.
const CasesFile = "cases.csv"

// Column prefixes of the cases CSV.
const (
	logitPrefix    = "class_logit_" // one column per class, in card order
	severityPrefix = "severity_"    // one column per check
)

// CasesHeader is the header of the cases CSV for card and the check names.
// The class logits are the card's per-class logits (inference.ClassLogits);
// true_class is the card's index of the phantom's label; the last column
// repeats the research-use notice on every row.
func CasesHeader(card *inference.Card, checks []string) []string {
	h := []string{"case_id", "index", "shift", "label", "true_class", "pattern_severity", "site", "age", "not_prepared"}
	for _, c := range card.Classes {
		h = append(h, logitPrefix+c)
	}
	h = append(h, "temperature", "probability", "uncalibrated_probability", "verdict", "fit_score", "failed_checks")
	for _, n := range checks {
		h = append(h, severityPrefix+n)
	}
	return append(h, "notice")
}

// num formats x so that parsing it gives x back exactly.
func num(x float64) string { return strconv.FormatFloat(x, 'g', -1, 64) }

// EncodeCasesCSV writes the cases of ev as CSV.
func EncodeCasesCSV(w io.Writer, card *inference.Card, ev *Evaluation) error {
	cw := csv.NewWriter(w)
	if err := cw.Write(CasesHeader(card, ev.Checks)); err != nil {
		return err
	}
	for _, c := range ev.Cases {
		rec := []string{c.ID, strconv.Itoa(c.Index), string(c.Shift), strconv.Itoa(c.Label), strconv.Itoa(TrueClass(card, c.Label)),
			num(c.Severity), c.Site, num(c.Age), oneLine(c.NotPrepared)}
		scoredCase := c.Prepared()
		zs := make([]string, len(card.Classes))
		if scoredCase {
			for i, z := range inference.ClassLogits(card, c.Logits) {
				zs[i] = num(z)
			}
		}
		rec = append(rec, zs...)
		rec = append(rec, num(card.Calibration.Temperature), optional(scoredCase, c.Probability), optional(scoredCase, c.Uncalibrated),
			c.Verdict, num(c.FitScore), strings.Join(c.Failed, ";"))
		for _, n := range ev.Checks {
			s, ok := c.Severities[n]
			rec = append(rec, optional(ok, s))
		}
		if err := cw.Write(append(rec, notice.Full)); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

func optional(ok bool, x float64) string {
	if !ok {
		return ""
	}
	return num(x)
}

func oneLine(s string) string { return strings.ReplaceAll(s, "\n", " ") }

// WriteCasesCSV writes the cases CSV atomically to path.
func WriteCasesCSV(path string, card *inference.Card, ev *Evaluation) error {
	return atomicfile.Write(path, func(w io.Writer) error { return EncodeCasesCSV(w, card, ev) })
}
