package cohort

import (
	"fmt"
	"io"
	"math"
	"path/filepath"
	"strconv"
	"strings"

	"brightfold/internal/atomicfile"
	"brightfold/internal/notice"
)

// scoreColumns are the fixed columns of scores.tsv with their descriptions
// (scores.json, a BIDS tabular-file sidecar); the covariates follow, then
// the notice.
var scoreColumns = [][2]string{
	{"participant_id", "Participant label with the sub- prefix."},
	{"session_id", "Session label with the ses- prefix, or n/a."},
	{"source", "The scan, relative to the input dataset."},
	{"status", "scored, or not scored: followed by the reason."},
	{"label", "The truth the input gives (1 positive, 0 negative), or n/a."},
	{"probability", "Calibrated probability of the positive class from the model folder, or n/a when the model was not run."},
	{"prediction", "The predicted class, or n/a."},
	{"fit_check", "in-distribution or out-of-distribution (the out-of-distribution fit check), or n/a."},
	{"fit_score", "Largest severity of the required fit checks; above 1 is out-of-distribution."},
	{"failed_checks", "Names of the failed fit checks, separated by commas, or n/a."},
}

// WriteScores writes OUTDIR/scores.tsv and scores.json for the records,
// sorted by participant, session and source.
func WriteScores(out string, recs []*Record, covariates []string) error {
	sortByEntity(recs, func(r *Record) (string, string, string) { return r.Participant, r.Session, r.Source })
	tsv := filepath.Join(out, ScoresTable)
	removeTemporaries(tsv, filepath.Join(out, ScoresSidecar))
	err := atomicfile.Write(tsv, func(w io.Writer) error {
		var head []string
		for _, c := range scoreColumns {
			head = append(head, c[0])
		}
		head = append(append(head, covariates...), "notice")
		if _, err := fmt.Fprintln(w, strings.Join(head, "\t")); err != nil {
			return err
		}
		for _, r := range recs {
			if _, err := fmt.Fprintln(w, strings.Join(scoreRow(r, covariates), "\t")); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return err
	}
	side := map[string]any{}
	for _, c := range scoreColumns {
		side[c[0]] = map[string]string{"Description": c[1]}
	}
	for _, c := range covariates {
		side[c] = map[string]string{"Description": "Covariate from the input (" + c + "), as given."}
	}
	side["notice"] = map[string]string{"Description": "The research-use notice, repeated on every row: " + notice.Full}
	return writeJSON(filepath.Join(out, ScoresSidecar), side)
}

// tsvCell makes a value safe for a TSV cell: tabs and newlines become
// spaces, empty becomes n/a.
func tsvCell(s string) string {
	s = strings.NewReplacer("\t", " ", "\n", " ", "\r", " ").Replace(s)
	if s == "" {
		return "n/a"
	}
	return s
}

func formatFloat(x float64) string {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return "n/a"
	}
	return strconv.FormatFloat(x, 'g', -1, 64)
}

func scoreRow(r *Record, covariates []string) []string {
	label := ""
	if r.Label != nil {
		label = strconv.Itoa(*r.Label)
	}
	prob, pred, verdict, fit, failed := "", "", "", "", ""
	if p, ok := r.Probability(); ok {
		prob, pred = formatFloat(p), r.Result.Prediction.Label
	}
	if r.Result != nil {
		verdict, fit = r.Result.OOD.Verdict, formatFloat(float64(r.Result.OOD.Score))
		var names []string
		for _, c := range r.Result.OOD.Checks {
			if !c.Pass {
				names = append(names, c.Name)
			}
		}
		failed = strings.Join(names, ",")
	}
	row := []string{r.Participant, r.Session, r.Source, r.Status, label, prob, pred, verdict, fit, failed}
	for _, c := range covariates {
		row = append(row, r.Covariates[c])
	}
	for i := range row {
		row[i] = tsvCell(row[i])
	}
	return append(row, notice.Full)
}
