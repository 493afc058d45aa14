package app

import (
	"fyne.io/fyne/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/inference"
	"brightfold/inference/fitcheck"
	"brightfold/internal/refcheck"
)

// demoFolder is where the tests' demo cohort is made (once, by the first
// test that starts the viewer on it); TestMain removes it.
var demoFolder string

func TestMain(m *testing.M) {
	dir, err := os.MkdirTemp("", "brightfold-app-demo-")
	if err != nil {
		panic(err)
	}
	demoFolder = filepath.Join(dir, "demo")
	code := m.Run()
	os.RemoveAll(dir)
	os.Exit(code)
}

// startDemo opens the viewer on the tests' demo cohort (one in-distribution
// case and one of each shifted variant) and waits for the first case.
func startDemo(t testing.TB, opts Options) *harness {
	t.Helper()
	refcheck.ORTLib(t)
	want := 8
	if opts.DemoDir == "" {
		opts.DemoDir, opts.DemoCases = demoFolder, 1
	} else {
		want = opts.DemoCases + 7
	}
	h := newHarness(t, opts)
	first := !fileExists(filepath.Join(opts.DemoDir, "cohort.csv"))
	h.u.start()
	if first {
		if !h.u.tasks.busy(taskDemo) || !h.u.taskBox.Visible() {
			t.Error("first start: no generation task with progress on screen")
		}
	}
	h.settle()
	if len(h.u.cases) != want {
		t.Fatalf("demo cohort lists %d cases, want %d with 7 shifted; status %q", len(h.u.cases), want, h.u.message.Text)
	}
	return h
}

func fileExists(p string) bool { _, err := os.Stat(p); return err == nil }

// The demo opens on its first case with the probability, its calibration
// temperature and a fit-check verdict with every check; a CT-like variant
// is flagged out-of-distribution in large words on the vermilion block.
func TestDemoCaseShowsEvidence(t *testing.T) {
	h := startDemo(t, Options{})
	u := h.u
	if u.cur != 0 || u.open == nil || u.cases[0].Code != "HMRU-0001" {
		t.Fatalf("first case not open: cur %d", u.cur)
	}
	p, err := parseProbability(u.head.prob.Text)
	if err != nil || p < 0 || p > 1 {
		t.Fatalf("probability shown as %q", u.head.prob.Text)
	}
	if !strings.Contains(u.head.probNote.Text, "half carry the pattern") {
		t.Errorf("the header does not say what prevalence the probability assumes: %q", u.head.probNote.Text)
	}
	if !strings.Contains(u.evidence.probCaption.Text, "T = ") || !strings.Contains(u.evidence.model.Text, "Model: ") {
		t.Errorf("caption %q, model %q", u.evidence.probCaption.Text, u.evidence.model.Text)
	}
	if h := u.fit.headline.Text; h != verdictIn && h != verdictOOD {
		t.Errorf("verdict %q", h)
	}
	if n := len(u.open.result.Checks); n < 10 || len(u.fit.checks.Objects) != len(passed(u.open.result.Checks)) || len(u.fit.causes.Objects) != len(u.open.result.Causes) {
		t.Errorf("%d checks, %d cause rows, %d passing rows", n, len(u.fit.causes.Objects), len(u.fit.checks.Objects))
	}

	h.openShifted("CT-like")
	if u.fit.headline.Text != verdictOOD || u.fit.block.FillColor != colOOD || u.fit.headline.TextSize < 24 {
		t.Fatalf("CT-like case: verdict %q colour %v size %v", u.fit.headline.Text, u.fit.block.FillColor, u.fit.headline.TextSize)
	}
	if !strings.Contains(u.evidence.status.Text, "should not be relied on") {
		t.Errorf("Evidence does not warn: %q", u.evidence.status.Text)
	}
	// The verdict leads; the probability is withheld, and so is the map,
	// until the reader asks; then the probability is marked unreliable.
	if u.head.verdict.Text != verdictOOD || u.head.prob.Text != withheldText || u.scan.overlay != nil ||
		!strings.Contains(u.head.causes.Text, "CT signature") {
		t.Errorf("CT-like case: header %q / %q (causes %q), overlay %v", u.head.verdict.Text, u.head.prob.Text, u.head.causes.Text, u.scan.overlay != nil)
	}
	shown := inference.FormatProbability(u.open.result.Prediction.Probability)
	for _, x := range h.texts() {
		if strings.Contains(x, shown) && !strings.Contains(x, "value") && !strings.Contains(x, "limit") && !strings.HasPrefix(x, "in distribution · ") { // list rows are other cases
			t.Errorf("the probability %s is on screen while withheld: %q", shown, x)
		}
	}
	u.showAnyway()
	h.settle()
	if !strings.Contains(u.head.prob.Text, unreliable) || u.scan.overlay == nil {
		t.Errorf("show anyway: %q, overlay %v (%q)", u.head.prob.Text, u.scan.overlay != nil, u.evidence.ovState.Text)
	}
	if !hasText(h.texts(), "FAIL") {
		t.Error("no failed check shown")
	}
}

// Meeting mode on the demo's DICOM case hides the fictional patient name
// and the cohort's folder.
func TestDemoMeetingMode(t *testing.T) {
	h := startDemo(t, Options{Meeting: true})
	for _, x := range h.texts() {
		for _, s := range []string{"DEMO^SUBJECT", "SUBJECT0001", demoFolder, "20260301"} {
			if strings.Contains(x, s) {
				t.Errorf("Meeting mode shows %q in %q", s, x)
			}
		}
	}
	h.u.setMeeting(false)
	if !hasText(h.texts(), "Demo, Subject0001") {
		t.Error("outside Meeting mode the demo DICOM case should show its fictional name")
	}
}

// Switching case while a case is loading and being scored drops the old
// results: the screen ends on the case chosen last, with its own score.
func TestSwitchingCaseMidwayIsSafe(t *testing.T) {
	h := startDemo(t, Options{})
	u := h.u
	for i := 1; i < len(u.cases); i++ {
		u.selectCase(i) // each cancels the previous case's tasks
	}
	last := len(u.cases) - 1
	h.settle()
	if u.cur != last || u.open == nil || u.open.c.Code != u.cases[last].Code {
		t.Fatalf("open case %v, want %s", u.open, u.cases[last].Code)
	}
	if u.open.result == nil {
		t.Fatalf("last case not scored: %q", u.evidence.status.Text)
	}
	if !strings.Contains(u.identity.Text, u.cases[last].Code) {
		t.Errorf("identity %q", u.identity.Text)
	}
}

// passed returns the checks that pass, in their order.
func passed(cs []fitcheck.Check) []fitcheck.Check {
	var out []fitcheck.Check
	for _, c := range cs {
		if c.Pass {
			out = append(out, c)
		}
	}
	return out
}

// A thick-slice scan fails several geometry checks at once; the header and
// the Fit check panel show them as one cause (inference.GroupCauses) with
// the checks that saw it, the fit score in the header, and the passing
// checks below, not one line per failed check.
func TestThickSliceOneCause(t *testing.T) {
	h := startDemo(t, Options{})
	u := h.u
	size := fitWindow(fyne.NewSize(1280, 800))
	h.w.Resize(size)
	h.openShifted("thick slices")
	// The header never scrolls: its causes must leave the window within a
	// 1280×800 screen.
	if m := u.root.MinSize(); m.Width > size.Width || m.Height > size.Height {
		t.Errorf("with the thick-slice case's causes the content needs %v, more than the window's %v", m, size)
	}
	r := u.open.result
	if r == nil || u.head.verdict.Text != verdictOOD {
		t.Fatalf("thick-slice case: verdict %q", u.head.verdict.Text)
	}
	failed := len(r.FailedChecks())
	if failed < 2 || len(r.Causes) == 0 || r.Causes[0].Name != inference.CauseGeometry || len(r.Causes[0].Checks) < 2 {
		t.Fatalf("thick-slice case: %d failed checks, causes %+v", failed, r.Causes)
	}
	head := u.head.causes.Text
	lines := strings.Split(head, "\n")
	if !strings.HasPrefix(lines[0], r.Causes[0].Title+":") || !strings.Contains(lines[0], inference.CheckTitle(r.Causes[0].Checks[0])) ||
		len(lines) != min(len(r.Causes), maxCauses+1)+1 || !strings.HasPrefix(lines[len(lines)-1], "Fit score "+inference.FormatValue(r.FitScore)) {
		t.Errorf("header causes (%d failed checks, %d causes):\n%s", failed, len(r.Causes), head)
	}
	if len(u.fit.causes.Objects) != len(r.Causes) || len(u.fit.checks.Objects) != len(passed(r.Checks)) || !u.fit.passing.Visible() {
		t.Errorf("Fit check: %d cause rows for %d causes, %d passing rows for %d", len(u.fit.causes.Objects), len(r.Causes),
			len(u.fit.checks.Objects), len(passed(r.Checks)))
	}
	// Checks that may only follow from the causes (inference.Cause.Consequence)
	// are listed but not counted as causes, as in `brightfold score`.
	if want := inference.Plural(inference.CountCauses(r.Causes), "cause", "causes") + ":"; !strings.HasPrefix(u.fit.sentence.Text, want) {
		t.Errorf("Fit check verdict %q, want it to start %q (causes %+v)", u.fit.sentence.Text, want, r.Causes)
	}
	all := strings.Join(h.texts(), "\n")
	for _, n := range r.Causes[0].Checks {
		if !strings.Contains(all, inference.CheckTitle(n)+" ("+inference.CheckDetail(fitCheck(r.Checks, n))+")") {
			t.Errorf("Fit check panel does not list %s with its value and limit", n)
		}
	}
}

// openShifted opens the demo's shifted case whose note names the shift.
func (h *harness) openShifted(shift string) {
	h.t.Helper()
	for i, c := range h.u.cases {
		if strings.Contains(c.Note, shift) {
			h.u.selectCase(i)
			h.settle()
			return
		}
	}
	h.t.Fatalf("no %s case in the demo cohort", shift)
}

// fitCheck is the named check of a list.
func fitCheck(cs []fitcheck.Check, name string) fitcheck.Check {
	for _, c := range cs {
		if c.Name == name {
			return c
		}
	}
	return fitcheck.Check{}
}
