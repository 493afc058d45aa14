package reading

import (
	"fmt"

	"brightfold/internal/report"
)

// CaseReads are the session's current reads of the case with the given
// code, unaided first, as the one-page case report shows them. The desktop
// app and `score --report --session` both compose the report's reads with
// it.
func (s *Session) CaseReads(code string) ([]report.CaseRead, error) {
	cur, err := s.CurrentReads()
	if err != nil {
		return nil, fmt.Errorf("case report: reads of %s: %w", code, err)
	}
	var out []report.CaseRead
	for _, p := range []Phase{Unaided, Aided} {
		if r, ok := cur[code][p]; ok {
			out = append(out, report.CaseRead{Condition: string(p), Rating: r.Rating,
				Confidence: r.Confidence, Locked: r.Locked, Amendments: r.Amendments})
		}
	}
	return out, nil
}
