package viewer

import (
	"strings"
	"time"
)

// PersonName shows a DICOM person name (PS3.5 §6.2, value representation
// PN: family^given^middle^prefix^suffix, with up to three "="-separated
// groups for alphabetic, ideographic and phonetic forms) the way a reader
// writes it: "ROE^JANE" → "Roe, Jane", "ROE^JANE^Q^DR" → "Dr Roe, Jane Q".
// Only the alphabetic group is used; a name already in mixed case keeps its
// case. Empty components are skipped.
func PersonName(pn string) string {
	alpha, _, _ := strings.Cut(strings.TrimSpace(pn), "=")
	parts := strings.Split(alpha, "^")
	get := func(i int) string {
		if i < len(parts) {
			return readableCase(strings.TrimSpace(parts[i]))
		}
		return ""
	}
	family, given, middle, prefix, suffix := get(0), get(1), get(2), get(3), get(4)
	name := family
	if rest := strings.TrimSpace(given + " " + middle); rest != "" {
		if name != "" {
			name += ", "
		}
		name += rest
	}
	if prefix != "" {
		name = prefix + " " + name
	}
	if suffix != "" {
		name += " " + suffix
	}
	return strings.TrimSpace(name)
}

// readableCase turns an all-capitals word group into capitalised words
// ("VAN DER BERG" → "Van Der Berg"); mixed case is kept as written.
func readableCase(s string) string {
	if s != strings.ToUpper(s) {
		return s
	}
	words := strings.Fields(strings.ToLower(s))
	for i, w := range words {
		r := []rune(w)
		r[0] = []rune(strings.ToUpper(string(r[0])))[0]
		for k := 1; k < len(r); k++ {
			if r[k-1] == '-' || r[k-1] == '\'' {
				r[k] = []rune(strings.ToUpper(string(r[k])))[0]
			}
		}
		words[i] = string(r)
	}
	return strings.Join(words, " ")
}

// DICOMDate shows a DICOM date (PS3.5 §6.2, value representation DA:
// YYYYMMDD) as an ISO 8601 date, "19530412" → "1953-04-12". A value that is
// not a valid date is returned unchanged.
func DICOMDate(da string) string {
	da = strings.TrimSpace(da)
	t, err := time.Parse("20060102", da)
	if err != nil {
		return da
	}
	return t.Format("2006-01-02")
}
