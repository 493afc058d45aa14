package viewer

import "testing"

// Person names follow the component order of DICOM PS3.5 §6.2 (PN: family,
// given, middle, prefix, suffix; "=" separates the alphabetic group from
// ideographic and phonetic ones); dates follow DA, YYYYMMDD, shown as ISO
// 8601. Expected strings are written from those definitions.
func TestPersonNameAndDate(t *testing.T) {
	for in, want := range map[string]string{
		"ROE^JANE":         "Roe, Jane",
		"ROE^JANE^Q^DR":    "Dr Roe, Jane Q",
		"DEMO^SUBJECT0001": "Demo, Subject0001",
		"Roe^Jane":         "Roe, Jane",
		"O'NEIL-SMITH^ANN": "O'Neil-Smith, Ann",
		"ROE":              "Roe",
		"^JANE":            "Jane",
		"YAMADA^TARO=山田^太郎=やまだ^たろう": "Yamada, Taro",
		"": "",
	} {
		if got := PersonName(in); got != want {
			t.Errorf("PersonName(%q) = %q, want %q", in, got, want)
		}
	}
	for in, want := range map[string]string{"19530412": "1953-04-12", "20260301": "2026-03-01", "1953": "1953", "": "", "19531340": "19531340"} {
		if got := DICOMDate(in); got != want {
			t.Errorf("DICOMDate(%q) = %q, want %q", in, got, want)
		}
	}
}
