package app

import (
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"brightfold/viewer"
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
	u.topBar.Refresh()
	u.refreshIdentity()
	u.casesPanel.refresh()
	u.message.SetText(u.clean(u.message.Text))
	u.refreshTasks()
}

// shownCode is how case i is named on screen: in Meeting mode a code from
// its place in the list ("Case 03"), or the reading session's code, never a
// header field or a file name; outside Meeting mode its own code.
func (u *UI) shownCode(i int) string {
	if i < 0 || i >= len(u.cases) {
		return ""
	}
	c := u.cases[i]
	if !u.meeting {
		return c.Code
	}
	if c.MeetingCode != "" {
		return c.MeetingCode
	}
	return fmt.Sprintf("Case %02d", i+1)
}

// clean removes, in Meeting mode, everything that could identify a patient
// or show where files are from a text that is about to be shown: the open
// case's patient identifiers (in DICOM and readable form), every case's own
// code, paths and file names, the user's folders, and any other absolute
// path. Outside Meeting mode it returns s unchanged.
func (u *UI) clean(s string) string {
	if !u.meeting || s == "" {
		return s
	}
	// Paths first and whole (folder names with spaces included), then
	// what is left of names, codes and folders.
	s = viewer.HidePaths(s, "[path hidden]")
	var secrets []string
	add := func(x string) {
		if x = strings.TrimSpace(x); len(x) >= 3 {
			secrets = append(secrets, x)
		}
	}
	if u.open != nil {
		p := u.open.vol.Patient
		for _, x := range []string{p.Name, p.ID, p.BirthDate, p.StudyDate, p.Accession, p.Institution,
			viewer.PersonName(p.Name), viewer.DICOMDate(p.BirthDate), viewer.DICOMDate(p.StudyDate)} {
			add(x)
			for _, part := range strings.FieldsFunc(x, func(r rune) bool { return r == '^' || r == ' ' || r == ',' }) {
				if len(part) >= 4 {
					add(part)
				}
			}
		}
		add(u.open.vol.Source)
	}
	for _, c := range u.cases {
		// A case's own code may be a header field (the demo's codes are its
		// DICOM PatientIDs): Meeting mode shows list codes instead.
		add(c.Code)
		for _, p := range c.Paths {
			add(p)
			add(filepath.Base(p))
			add(filepath.Dir(p))
		}
	}
	for _, d := range userFolders() {
		add(d)
	}
	// Longest first, so that a path goes before the file name inside it.
	sort.Slice(secrets, func(i, j int) bool { return len(secrets[i]) > len(secrets[j]) })
	for _, x := range secrets {
		s = strings.ReplaceAll(s, x, "[hidden]")
	}
	return s
}

// userFolders are the user's home, cache and export folders, which name the
// user (and may hold spaces).
func userFolders() []string {
	var out []string
	if h, err := os.UserHomeDir(); err == nil && len(h) > 1 {
		out = append(out, h, filepath.Join(h, exportFolderName))
	}
	if c, err := os.UserCacheDir(); err == nil {
		out = append(out, c)
	}
	return out
}
