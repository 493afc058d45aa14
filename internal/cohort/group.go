package cohort

import (
	"fmt"
	"path/filepath"
	"sort"
	"strings"

	"brightfold/internal/inputerr"
)

// Collect reads the result of every case of d from out, as a group run
// does after the shards. It refuses, naming them, when cases are missing or
// were made with another model folder or options.
func Collect(d *Dataset, out, modelSHA, mapMethod string) ([]*Record, error) {
	if mapMethod == "" {
		mapMethod = "none"
	}
	want := optionsKey(modelSHA, mapMethod)
	var recs []*Record
	var missing, stale []string
	for _, c := range d.Cases {
		r, ok := readRecord(filepath.Join(out, ResultPath(c)))
		switch {
		case !ok:
			missing = append(missing, c.Entities)
		case r.Sweep.Key != want.Key:
			stale = append(stale, c.Entities)
		default:
			if _, ok := complete(out, c, want); !ok {
				missing = append(missing, c.Entities)
				continue
			}
			recs = append(recs, r)
		}
	}
	if len(missing)+len(stale) > 0 {
		return nil, inputerr.New(out, "%s", incompleteMessage(missing, stale, len(d.Cases)))
	}
	return recs, nil
}

func incompleteMessage(missing, stale []string, total int) string {
	var parts []string
	if len(missing) > 0 {
		parts = append(parts, fmt.Sprintf("%d of %d cases have no complete result (%s)", len(missing), total, listSome(missing)))
	}
	if len(stale) > 0 {
		parts = append(parts, fmt.Sprintf("%d were made with another model folder or options (%s)", len(stale), listSome(stale)))
	}
	return "cannot merge: " + strings.Join(parts, "; ") + "; run the participant level (or the missing shards) first"
}

// listSome names up to ten items and counts the rest.
func listSome(xs []string) string {
	sort.Strings(xs)
	if len(xs) <= 10 {
		return strings.Join(xs, ", ")
	}
	return strings.Join(xs[:10], ", ") + fmt.Sprintf(" and %d more", len(xs)-10)
}
