package cohort

import (
	"os"
	"testing"
)

// TestWriteConfoundedDemo writes the demo cohort with a planted site
// confound as a BIDS dataset into $BRIGHTFOLD_AUDIT_DEMO (skipped when
// unset): 120 phantoms at 1 mm, site-A 30 with the pattern and 10 without,
// site-B 20 and 20, site-C 10 and 30. scripts/audit-demo.sh uses it.
func TestWriteConfoundedDemo(t *testing.T) {
	dir := os.Getenv("BRIGHTFOLD_AUDIT_DEMO")
	if dir == "" {
		t.Skip("set BRIGHTFOLD_AUDIT_DEMO=DIR to write the confounded demo cohort")
	}
	subs := ConfoundedSubjects(2026, map[string][2]int{"site-A": {30, 10}, "site-B": {20, 20}, "site-C": {10, 30}})
	if len(subs) != 120 {
		t.Fatalf("%d subjects", len(subs))
	}
	must(t, WritePhantomBIDS(dir, subs, 1))
}
