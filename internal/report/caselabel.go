package report

import "fmt"

// CaseLabel names a case on the report: the code alone in Meeting mode,
// else the code with the scan's file name (no folders).
func CaseLabel(code, file string, meeting bool) string {
	if meeting || file == "" {
		return code
	}
	return fmt.Sprintf("%s (%s)", code, file)
}
