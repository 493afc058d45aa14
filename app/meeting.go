package app

import (
	"path/filepath"
	"regexp"
	"sort"
	"strings"
)

// setMeeting switches Meeting mode and redraws every identifying text.
func (u *UI) setMeeting(on bool) {
	if u.meeting == on {
		return
	}
	u.meeting = on
	if u.meetingCheck.Checked != on {
		u.meetingCheck.SetChecked(on)
	}
	u.applyMeeting()
}

// applyMeeting shows the Meeting mode state and refreshes what it hides.
func (u *UI) applyMeeting() {
	if u.meeting {
		u.meetingChip.Show()
		u.openBtn.Disable()
	} else {
		u.meetingChip.Hide()
		u.openBtn.Enable()
	}
	u.refreshIdentity()
	u.casesPanel.refresh()
	u.message.SetText(u.clean(u.message.Text))
	u.refreshTasks()
}

// absPath matches absolute file paths and home-relative paths in free text.
var absPath = regexp.MustCompile(`(~|[A-Za-z]:)?[/\\][^\s"':;,()]+`)

// clean removes, in Meeting mode, everything that could identify a patient
// or show where files are from a text that is about to be shown: the open
// case's patient identifiers, every case's paths and file names, and any
// other absolute path. Outside Meeting mode it returns s unchanged.
func (u *UI) clean(s string) string {
	if !u.meeting || s == "" {
		return s
	}
	var secrets []string
	add := func(x string) {
		if x = strings.TrimSpace(x); len(x) >= 3 {
			secrets = append(secrets, x)
		}
	}
	if u.open != nil {
		p := u.open.vol.Patient
		for _, x := range []string{p.Name, p.ID, p.BirthDate, p.StudyDate, p.Accession, p.Institution} {
			add(x)
			for _, part := range strings.FieldsFunc(x, func(r rune) bool { return r == '^' || r == ' ' }) {
				if len(part) >= 4 {
					add(part)
				}
			}
		}
		add(u.open.vol.Source)
	}
	for _, c := range u.cases {
		for _, p := range c.Paths {
			add(p)
			add(filepath.Base(p))
			add(filepath.Dir(p))
		}
	}
	// Case codes are what Meeting mode shows, even where a demo patient ID
	// repeats one.
	codes := map[string]bool{}
	for _, c := range u.cases {
		codes[c.Code] = true
	}
	kept := secrets[:0]
	for _, x := range secrets {
		if !codes[x] {
			kept = append(kept, x)
		}
	}
	secrets = kept
	// Longest first, so that a path goes before the file name inside it.
	sort.Slice(secrets, func(i, j int) bool { return len(secrets[i]) > len(secrets[j]) })
	for _, x := range secrets {
		s = strings.ReplaceAll(s, x, "[hidden]")
	}
	return absPath.ReplaceAllString(s, "[path hidden]")
}
