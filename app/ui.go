package app

import (
	"fmt"
	"image/color"
	"path/filepath"
	"sync"
	"time"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/canvas"
	"fyne.io/fyne/v2/container"
	"fyne.io/fyne/v2/theme"
	"fyne.io/fyne/v2/widget"

	"brightfold/internal/notice"
	"brightfold/overlay"
	"brightfold/viewer"
)

// UI is one viewer window and its state. Its fields are touched only on the
// UI thread; background work reaches it through post.
type UI struct {
	app   fyne.App
	win   fyne.Window
	opts  Options
	post  func(func())
	tasks *tasks
	model *model
	store *caseStore
	timed map[overlay.Method]time.Duration // how long each method's last map took
	// chosen is when the open case was chosen; timings logs what followed.
	chosen  time.Time
	timings []string

	ready     chan struct{} // closed once the first case is shown with its evidence
	readyOnce sync.Once

	meeting bool
	// hideScores keeps probabilities out of the case list (an unaided read).
	hideScores bool
	cases      []Case
	cur        int       // index of the selected case, -1 for none
	open       *openCase // the loaded case, nil while loading or when none

	root         fyne.CanvasObject
	bannerBox    fyne.CanvasObject
	scanSection  fyne.CanvasObject
	column       fyne.CanvasObject
	banner       *widget.Label
	identity     *widget.Label
	meetingCheck *widget.Check
	meetingChip  *fyne.Container
	idHead       string          // the identity line without the path
	idPath       string          // the open case's path, "" in Meeting mode
	topBar       *fyne.Container // identity line with the chip; laid out again when the chip shows or hides
	openBtn      *widget.Button
	taskBox      *fyne.Container
	taskText     *widget.Label
	taskBar      *widget.ProgressBar
	taskKind     string // the kind of task the strip shows
	message      *widget.Label

	scrolls []*container.Scroll // the reading column's panes, reflowed after text changes

	casesPanel *casesPanel
	scan       *scanPanel
	evidence   *evidencePanel
	fit        *fitPanel
	head       *headPanel
	read       *readPanel
}

// newUI builds the window content. post runs a function on the UI thread.
func newUI(a fyne.App, w fyne.Window, opts Options, post func(func())) *UI {
	u := &UI{app: a, win: w, opts: opts, post: post, cur: -1, ready: make(chan struct{})}
	u.tasks = newTasks(post, u.refreshTasks)
	u.model = &model{path: opts.Model}
	u.store = newCaseStore(u.model)
	u.timed = map[overlay.Method]time.Duration{}
	u.meeting = opts.Meeting
	u.build()
	u.fit.unavailable("No case open.")
	u.evidence.unavailable("No case open.")
	u.head.unavailable("No case open.")
	u.evidence.refreshMethodLabels()
	u.applyMeeting()
	return u
}

// build lays the window out: the notice banner across the top, a thin bar
// for the case identity and Meeting mode, then Cases | Scan | the reading
// column (Fit check above Evidence above My read), and the task strip.
func (u *UI) build() {
	u.banner = widget.NewLabelWithStyle(notice.Full, fyne.TextAlignCenter, fyne.TextStyle{Bold: true})
	u.banner.Wrapping = fyne.TextWrapWord
	u.banner.Importance = widget.MediumImportance
	bannerBG := canvas.NewRectangle(colChalk)
	banner := container.NewStack(bannerBG, container.NewThemeOverride(u.banner, chalkTheme{newTheme()}))
	u.bannerBox = banner

	u.identity = widget.NewLabel("")
	u.identity.Truncation = fyne.TextTruncateEllipsis
	u.meetingCheck = widget.NewCheck("Meeting mode", func(on bool) { u.setMeeting(on) })
	u.meetingCheck.Checked = u.meeting
	chipText := canvas.NewText("MEETING MODE ON · names, IDs, dates and paths hidden", colText)
	chipText.TextStyle = fyne.TextStyle{Bold: true}
	u.meetingChip = container.NewStack(canvas.NewRectangle(colMeeting), container.NewPadded(chipText))
	u.openBtn = widget.NewButtonWithIcon("Open…", theme.FolderOpenIcon(), u.showOpenMenu)
	help := widget.NewButtonWithIcon("Keys", theme.HelpIcon(), u.showHelp)
	title := canvas.NewText("Brightfold", colSeaGlass)
	title.TextStyle = fyne.TextStyle{Bold: true}
	title.TextSize = theme.TextSubHeadingSize()
	u.topBar = container.NewBorder(nil, nil,
		container.NewHBox(title, widget.NewSeparator(), u.openBtn),
		container.NewHBox(u.meetingChip, u.meetingCheck, help),
		container.New(&widthLayout{changed: func(float32) { u.fitIdentity() }}, u.identity))

	u.casesPanel = newCasesPanel(u)
	u.scan = newScanPanel(u)
	u.evidence = newEvidencePanel(u)
	u.fit = newFitPanel(u)
	u.head = newHeadPanel(u)
	u.read = newReadPanel(u)

	// The reading column: a header that never scrolls (the verdict and the
	// probability), then the fit check's rows, the evidence and My read,
	// each scrolling on its own.
	fit := container.NewVScroll(section("Fit check", u.fit.root))
	evid := container.NewVScroll(container.NewVBox(section("Evidence", u.evidence.root), section("My read", u.read.root)))
	u.scrolls = []*container.Scroll{fit, evid}
	colSplit := container.NewVSplit(fit, evid)
	colSplit.Offset = 0.35
	u.column = container.NewBorder(container.NewPadded(u.head.root), nil, nil, nil, colSplit)
	u.scanSection = section("Scan", u.scan.root)
	right := container.NewHSplit(u.scanSection, u.column)
	right.Offset = 0.66
	main := container.NewHSplit(section("Cases", u.casesPanel.root), right)
	main.Offset = 0.13

	u.message = widget.NewLabel("")
	u.message.Truncation = fyne.TextTruncateEllipsis
	u.taskText = widget.NewLabel("")
	u.taskText.Truncation = fyne.TextTruncateEllipsis
	u.taskBar = widget.NewProgressBar()
	cancel := widget.NewButtonWithIcon("Cancel", theme.CancelIcon(), func() { u.cancelTask(u.taskKind) })
	u.taskBox = container.NewBorder(nil, nil, nil, cancel, container.NewGridWithColumns(2, u.taskText, u.taskBar))
	u.taskBox.Hide()
	// One line under the panels: the status message, and at its right the
	// task strip, whose room is reserved (a button's height, a third of a
	// 1280-pixel window), task or not, so the planes never jump.
	strip := container.NewStack(spacer(420, cancel.MinSize().Height), u.taskBox)
	bottom := container.NewBorder(nil, nil, nil, strip, u.message)
	u.root = container.NewBorder(container.NewVBox(banner, container.NewPadded(u.topBar), widget.NewSeparator()),
		bottom, nil, nil, main)
}

// reflow lays the reading column out again after its texts changed: a
// wrapped label knows its height only once it has its width, so a second
// pass gives the rows their real heights (otherwise lines overlap).
func (u *UI) reflow() {
	for i := 0; i < 2; i++ {
		for _, s := range u.scrolls {
			s.Content.Refresh()
			s.Refresh()
		}
		if u.column != nil {
			u.column.Refresh()
		}
	}
}

// section is a panel with its name above it.
func section(name string, content fyne.CanvasObject) fyne.CanvasObject {
	t := canvas.NewText(name, colSeaGlass)
	t.TextStyle = fyne.TextStyle{Bold: true}
	t.TextSize = theme.TextSubHeadingSize()
	rule := canvas.NewRectangle(colSeaGlass)
	rule.SetMinSize(fyne.NewSize(24, 2))
	head := container.NewVBox(t, container.NewHBox(rule))
	return container.NewBorder(container.NewPadded(head), nil, nil, nil, container.NewPadded(content))
}

// chalkTheme draws the banner's text in dark ink on the chalk ground.
type chalkTheme struct{ fyne.Theme }

// Color makes the foreground dark ink.
func (c chalkTheme) Color(n fyne.ThemeColorName, v fyne.ThemeVariant) color.Color {
	if n == theme.ColorNameForeground {
		return colChalkInk
	}
	return c.Theme.Color(n, v)
}

// start begins the first work: the cases given on the command line, or the
// demo cohort.
func (u *UI) start() {
	if u.opts.Session != "" {
		u.read.start()
		return
	}
	if len(u.opts.Paths) > 0 {
		u.addPaths(u.opts.Paths, true)
		return
	}
	u.startDemo()
}

// close cancels background work when the window closes.
func (u *UI) close() {
	u.tasks.cancel(taskDemo, taskLoad, taskScore, taskRelevance)
	u.store.close()
	u.read.close()
}

// markReady releases a waiting screenshot.
func (u *UI) markReady() { u.readyOnce.Do(func() { close(u.ready) }) }

// say shows a status line; in Meeting mode identifiers and paths are removed.
func (u *UI) say(s string) {
	u.message.Importance = widget.MediumImportance
	u.message.SetText(u.clean(s))
}

// fail shows an error line, cleaned like say.
func (u *UI) fail(err error) {
	u.message.Importance = widget.DangerImportance
	u.message.SetText(u.clean(err.Error()))
}

// refreshTasks shows the first running task in the task strip with its
// progress and a Cancel button, and how many more run. The strip's widgets
// are made once and changed in place, and the strip keeps its height when
// nothing runs, so the planes do not jump; a task of unknown length shows
// its words without an animated bar, which would repaint the window many
// times a second and take processor time from the work.
func (u *UI) refreshTasks() {
	if u.taskBox == nil {
		return
	}
	list := u.tasks.snapshot()
	if len(list) == 0 {
		u.taskBox.Hide()
		return
	}
	t := list[0]
	label := t.label
	if t.msg != "" {
		label += ": " + t.msg
	}
	if len(list) > 1 {
		label += fmt.Sprintf("  (+%d more)", len(list)-1)
	}
	u.taskText.SetText(u.clean(label))
	if t.frac >= 0 {
		u.taskBar.SetValue(t.frac)
		u.taskBar.Show()
	} else {
		u.taskBar.Hide()
	}
	u.taskKind = t.kind
	u.taskBox.Show()
}

// cancelTask stops one kind of work and says so where its result would go.
func (u *UI) cancelTask(kind string) {
	u.tasks.cancel(kind)
	switch kind {
	case taskScore:
		u.evidence.showCancelled()
		u.fit.showCancelled()
	case taskRelevance:
		u.evidence.relevanceCancelled()
	case taskLoad:
		u.scan.showMessage("Loading cancelled. Pick the case again to load it.")
	case taskDemo:
		u.casesPanel.setNote("Demo cohort generation cancelled. Restart Brightfold to generate it.")
	}
	u.say("Cancelled.")
}

// refreshIdentity shows who and what is open, as Meeting mode allows:
// in Meeting mode only the list code; outside it the case's code, the
// patient's name and dates in readable form, and the scan's path.
func (u *UI) refreshIdentity() {
	if u.cur < 0 || u.cur >= len(u.cases) {
		u.idHead, u.idPath = "No case open", ""
		u.fitIdentity()
		u.win.SetTitle("Brightfold")
		return
	}
	c := u.cases[u.cur]
	code := u.shownCode(u.cur)
	head, path := code, ""
	if !u.meeting {
		if u.open != nil {
			if p := u.open.vol.Patient; !p.Empty() {
				head += fmt.Sprintf("  ·  %s  ·  ID %s  ·  born %s  ·  study %s", dash(viewer.PersonName(p.Name)), dash(p.ID),
					dash(viewer.DICOMDate(p.BirthDate)), dash(viewer.DICOMDate(p.StudyDate)))
			}
		}
		path = firstPath(c)
		u.win.SetTitle("Brightfold · " + code + " · " + filepath.Base(firstPath(c)))
	} else {
		u.win.SetTitle("Brightfold · " + code + " · Meeting mode")
	}
	if c.Note != "" {
		head += "  ·  " + c.Note
	}
	u.idHead, u.idPath = u.clean(head), path
	u.fitIdentity()
}

// fitIdentity shows the identity line in the room the bar gives it: the
// case, its identifiers and note, then its path, shortened in the middle
// (viewer.ElidePath) rather than cut when the line is too long.
func (u *UI) fitIdentity() {
	text := u.idHead
	if u.idPath != "" && !u.meeting {
		th := u.identity.Theme()
		room := u.identity.Size().Width - 2*th.Size(theme.SizeNameInnerPadding)
		size := th.Size(theme.SizeNameText)
		fits := func(p string) bool {
			return room <= 0 || fyne.MeasureText(text+"  ·  "+p, size, u.identity.TextStyle).Width <= room
		}
		text += "  ·  " + viewer.ElidePath(u.idPath, fits)
	}
	u.identity.SetText(text)
}

func dash(s string) string {
	if s == "" {
		return "—"
	}
	return s
}

func firstPath(c Case) string {
	if len(c.Paths) == 0 {
		return ""
	}
	return c.Paths[0]
}

// spacer is an empty object of the given minimum size.
func spacer(w, h float32) fyne.CanvasObject {
	r := canvas.NewRectangle(color.Transparent)
	r.SetMinSize(fyne.NewSize(w, h))
	return r
}

// timing notes how long after choosing the case a stage reached the
// screen ("scan", "score", "map"); the screenshot mode prints the notes.
func (u *UI) timing(stage string) {
	if len(u.timings) < 32 && !u.chosen.IsZero() {
		u.timings = append(u.timings, fmt.Sprintf("%s %s after %.2f s", u.shownCode(u.cur), stage, time.Since(u.chosen).Seconds()))
	}
}
