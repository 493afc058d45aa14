package app

import (
	"fmt"
	"strconv"
	"strings"
	"time"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/container"
	"fyne.io/fyne/v2/driver/desktop"
	"fyne.io/fyne/v2/widget"

	"brightfold/internal/reading"
)

// readPanel is the "My read" panel. Without a reading session it says how
// to start one; with one (view --session FILE) it holds the worklist
// ("12 of 40", previous, next, resume), the reader's probability that the
// pattern is present (0–100), an optional confidence (1–5), a note and
// "Lock read". In an unaided read the Evidence and Fit check panels and the
// overlay are hidden and Meeting mode is forced on.
type readPanel struct {
	u    *UI
	root fyne.CanvasObject

	sess   *reading.Session
	tasks  []reading.Task
	ti     int       // index of the shown task in tasks, -1 for none
	opened time.Time // when the shown task was put on screen

	progress   *widget.Label
	phase      *widget.Label
	rating     *widget.Entry
	slider     *widget.Slider
	confidence *widget.RadioGroup
	note       *widget.Entry
	lock       *widget.Button
	status     *widget.Label
	form       *fyne.Container
}

func newReadPanel(u *UI) *readPanel {
	p := &readPanel{u: u, ti: -1}
	l := widget.NewLabel("Start a reading session to record your own read, unaided and then aided: " +
		"brightfold session new --cases CASES --reader NAME --out FILE, then brightfold view --session FILE.")
	l.Wrapping = fyne.TextWrapWord
	l.Importance = widget.LowImportance
	p.root = container.NewStack(l)
	return p
}

// close closes the session file.
func (p *readPanel) close() {
	if p.sess != nil {
		p.sess.Close()
	}
}

// blinds reports whether the model's evidence must stay hidden: a session
// read without the model (unaided) is on screen.
func (p *readPanel) blinds() bool {
	return p.sess != nil && p.ti >= 0 && p.tasks[p.ti].Phase == reading.Unaided
}

// start opens the session of Options.Session: its cases become the Cases
// list in reading order and the first read not yet made is opened.
func (p *readPanel) start() {
	s, err := reading.Open(p.u.opts.Session)
	if err != nil {
		p.u.fail(err)
		return
	}
	p.sess = s
	p.u.setMeeting(true) // a session starts in Meeting mode; the reader may leave it in an aided read
	p.build()
	cases, err := s.Cases()
	if err != nil {
		p.u.fail(err)
		return
	}
	for _, c := range cases {
		p.u.cases = append(p.u.cases, Case{Code: c.Code, Paths: []string{c.Source}, Series: c.Series})
	}
	p.u.casesPanel.refresh()
	p.u.win.Canvas().AddShortcut(&desktop.CustomShortcut{KeyName: fyne.KeyL, Modifier: fyne.KeyModifierControl},
		func(fyne.Shortcut) { p.lockRead() })
	p.resume()
}

// build replaces the hint with the reading form.
func (p *readPanel) build() {
	p.progress = widget.NewLabelWithStyle("", fyne.TextAlignLeading, fyne.TextStyle{Bold: true})
	p.phase = widget.NewLabel("")
	p.phase.Wrapping = fyne.TextWrapWord
	p.rating = widget.NewEntry()
	p.rating.SetPlaceHolder("0–100")
	p.slider = widget.NewSlider(0, 100)
	p.slider.Step = 1
	p.slider.OnChanged = func(v float64) {
		if s := strconv.Itoa(int(v)); p.rating.Text != s {
			p.rating.SetText(s)
		}
	}
	p.rating.OnChanged = func(s string) {
		if v, err := strconv.ParseFloat(strings.TrimSpace(s), 64); err == nil && v >= 0 && v <= 100 && v != p.slider.Value {
			p.slider.SetValue(v)
		}
	}
	p.confidence = widget.NewRadioGroup([]string{"1", "2", "3", "4", "5"}, nil)
	p.confidence.Horizontal = true
	p.note = widget.NewMultiLineEntry()
	p.note.SetPlaceHolder("Note (optional)")
	p.note.SetMinRowsVisible(2)
	p.lock = widget.NewButton("Lock read (Ctrl+L)", p.lockRead)
	p.lock.Importance = widget.HighImportance
	p.status = widget.NewLabel("")
	p.status.Wrapping = fyne.TextWrapWord
	nav := container.NewHBox(
		widget.NewButton("Previous", func() { p.step(-1) }),
		widget.NewButton("Next", func() { p.step(1) }),
		widget.NewButton("Resume", p.resume))
	p.form = container.NewVBox(
		widget.NewLabel("Your probability that the pattern is present"),
		container.NewBorder(nil, nil, nil, container.NewGridWrap(fyne.NewSize(70, 36), p.rating), p.slider),
		widget.NewLabel("Confidence (optional, 1 low – 5 high)"),
		p.confidence, p.note, p.lock)
	p.root.(*fyne.Container).Objects = []fyne.CanvasObject{
		container.NewVBox(p.progress, nav, p.phase, p.form, p.status)}
	p.root.Refresh()
}

// refreshTasks reloads the worklist from the session file.
func (p *readPanel) refreshTasks() bool {
	t, err := p.sess.Worklist()
	if err != nil {
		p.u.fail(err)
		return false
	}
	p.tasks = t
	return true
}

// resume opens the first read not yet made (or the last read when all are made).
func (p *readPanel) resume() {
	if !p.refreshTasks() || len(p.tasks) == 0 {
		return
	}
	i := reading.NextTask(p.tasks)
	if i < 0 {
		i = len(p.tasks) - 1
	}
	p.show(i)
}

// step moves to the previous or next read in the worklist.
func (p *readPanel) step(d int) {
	if p.sess == nil || !p.refreshTasks() || len(p.tasks) == 0 {
		return
	}
	p.show(min(max(p.ti+d, 0), len(p.tasks)-1))
}

// show puts task i on screen: it opens its case (which calls caseSelected).
func (p *readPanel) show(i int) {
	p.ti = i
	t := p.tasks[i]
	for ci, c := range p.u.cases {
		if c.Code == t.Case.Code {
			if ci == p.u.cur && p.u.open != nil {
				p.applyPhase()
			} else {
				p.u.selectCase(ci)
			}
			return
		}
	}
}

// caseSelected follows a case opened from the Cases list or the keys: the
// shown task becomes that case's first read not yet made (or its last).
func (p *readPanel) caseSelected() {
	if p.sess == nil || p.u.cur < 0 {
		return
	}
	code := p.u.cases[p.u.cur].Code
	if p.ti < 0 || p.ti >= len(p.tasks) || p.tasks[p.ti].Case.Code != code {
		p.ti = -1
		for i, t := range p.tasks {
			if t.Case.Code == code && (p.ti < 0 || !t.Done && p.tasks[p.ti].Done) {
				p.ti = i
			}
		}
	}
	p.applyPhase()
}

// applyPhase shows the task's phase: the form, and in an unaided read the
// evidence hidden and Meeting mode forced.
func (p *readPanel) applyPhase() {
	if p.ti < 0 {
		return
	}
	t := p.tasks[p.ti]
	p.opened = time.Now()
	cases := len(p.u.cases)
	pos := t.Case.Position
	p.progress.SetText(fmt.Sprintf("Case %d of %d · %s · %s read", pos, cases, t.Case.Code, t.Phase))
	if p.sess.Meta.Design == reading.Crossover {
		p.progress.SetText(p.progress.Text + fmt.Sprintf(" · sitting %d", t.Sitting))
	}
	blind := t.Phase == reading.Unaided
	if blind {
		p.phase.SetText("Unaided: the model's evidence, the verdict, the fit check and the overlay are hidden until this read is locked. Meeting mode is on.")
		p.u.setMeeting(true)
		p.u.meetingCheck.Disable()
		p.u.head.root.Hide()
		p.u.fit.root.Hide()
		p.u.evidence.root.Hide()
		p.u.scan.ovCheck.Disable()
	} else {
		p.phase.SetText("Aided: the model's evidence and the fit check are shown.")
		p.u.meetingCheck.Enable()
		p.u.head.root.Show()
		p.u.fit.root.Show()
		p.u.evidence.root.Show()
		p.u.scan.ovCheck.Enable()
	}
	p.u.scan.renderAll()
	p.fillForm(t)
	p.u.reflow()
}

// fillForm shows the locked read of the task, if any, or an empty form.
func (p *readPanel) fillForm(t reading.Task) {
	cur, err := p.sess.CurrentReads()
	if err != nil {
		p.u.fail(err)
		return
	}
	if r, ok := cur[t.Case.Code][t.Phase]; ok {
		p.rating.SetText(strconv.FormatFloat(r.Rating, 'g', -1, 64))
		p.confidence.SetSelected(map[bool]string{true: strconv.Itoa(r.Confidence), false: ""}[r.Confidence > 0])
		p.note.SetText(r.Note)
		p.lock.SetText("Amend read (Ctrl+L)")
		p.status.SetText(fmt.Sprintf("Locked %s%s. A change is recorded as a new, dated amendment.",
			r.Original.Local().Format("2006-01-02 15:04"), map[bool]string{true: fmt.Sprintf(", amended %d times", r.Amendments), false: ""}[r.Amendments > 0]))
		return
	}
	p.rating.SetText("")
	p.slider.SetValue(0)
	p.confidence.SetSelected("")
	p.note.SetText("")
	p.lock.SetText("Lock read (Ctrl+L)")
	p.status.SetText("")
}

// lockRead records the shown read (or its amendment) in the session file;
// for an aided read the model's output on screen is stored with it. It then
// opens the next read not yet made.
func (p *readPanel) lockRead() {
	if p.sess == nil || p.ti < 0 {
		return
	}
	t := p.tasks[p.ti]
	v, err := strconv.ParseFloat(strings.TrimSpace(p.rating.Text), 64)
	if err != nil || v < 0 || v > 100 {
		p.status.SetText("Give your probability as a number from 0 to 100.")
		p.u.win.Canvas().Focus(p.rating)
		return
	}
	conf, _ := strconv.Atoi(p.confidence.Selected)
	amend := strings.HasPrefix(p.lock.Text, "Amend")
	if t.Phase == reading.Aided && !amend && p.u.open != nil && p.u.open.result != nil && p.u.open.card != nil {
		res, card := p.u.open.result, p.u.open.card
		if err := p.sess.RecordModelOutput(reading.ModelOutput{Code: t.Case.Code, ModelSHA256: card.ModelSHA256,
			ModelName: card.Name + " " + card.Version, Probability: res.Prediction.Probabilities[card.PositiveClass],
			Verdict: res.Verdict}); err != nil {
			p.u.fail(err)
		}
	}
	rec, err := p.sess.Record(reading.Read{Code: t.Case.Code, Phase: t.Phase, Rating: v, Confidence: conf,
		Note: p.note.Text, Opened: p.opened, Amend: amend})
	if err != nil {
		p.status.SetText(p.u.clean(err.Error()))
		return
	}
	msg := fmt.Sprintf("%s %s read locked.", t.Case.Code, t.Phase)
	if rec.Warning != "" {
		msg += " Warning: " + rec.Warning + "."
	}
	if amend {
		p.fillForm(t)
	} else {
		p.resume() // opening the next case clears the status line: say after it
	}
	p.u.say(msg)
}
