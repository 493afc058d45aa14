package app

import (
	"fmt"
	"image"
	"image/png"
	"io"
	"os"
	"path/filepath"
	"strings"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/dialog"
	"fyne.io/fyne/v2/storage"

	"brightfold/inference"
	"brightfold/internal/atomicfile"
	"brightfold/viewer"
)

// exportImage is the open case as a composed figure (viewer.Figure), not
// a crop of the window: a strip of slices of the large plane across the
// strongest relevance, with the overlay as styled now, the case code (a
// list code in Meeting mode), the model, the fit-check verdict, the
// probability or the word that it is withheld, the map's method and
// coverage, a locator, the colour bar with its units, and the notice.
func (u *UI) exportImage() (image.Image, error) {
	oc, sp := u.open, u.scan
	if oc == nil || sp.scene == nil {
		return nil, fmt.Errorf("export: no case is open")
	}
	spec := viewer.FigureSpec{
		Plane: sp.order[0], At: sp.at, Convention: sp.conv, Window: sp.win, Interp: sp.interp,
		Case: u.shownCode(u.cur), Verdict: "No verdict", Headline: "-",
	}
	if oc.card != nil {
		spec.Model = fmt.Sprintf("Model: %s, version %s", oc.card.Name, oc.card.Version)
	}
	if r := oc.result; r != nil {
		spec.Verdict, spec.Headline = "In distribution", inference.FormatProbability(r.Prediction.Probability)
		spec.Lines = append(spec.Lines, fmt.Sprintf("Probability of %s (%s). %s", inference.ClassName(oc.card.PositiveClass), inference.CalibrationLabel(oc.card), inference.PrevalenceNote(oc.card)))
		if inference.Withheld(r) {
			spec.Verdict, spec.OOD = "OUT OF DISTRIBUTION", true
			spec.Lines = append([]string{"The scan is unlike the training scans."}, inference.VerdictCauses(r)...)
			switch {
			case r.Prepared == nil:
				spec.Headline = "No probability"
			case u.withheld(oc):
				spec.Headline = "Withheld"
			default:
				spec.Headline += " (unreliable)"
			}
		}
	}
	if o := sp.visibleOverlay(); o != nil && oc.relevance != nil {
		spec.Overlay, spec.Style = o, sp.style
		spec.Lines = append(spec.Lines, fmt.Sprintf("Relevance map: %s, the strongest %.0f %% of its voxels inside the head; warm colours speak for the class.",
			oc.relevance.Method.Title(), u.evidence.threshold.Value))
	}
	img, err := viewer.Figure(sp.scene, spec)
	if err != nil {
		return nil, fmt.Errorf("export: %w", err)
	}
	return img, nil
}

// exportName is the suggested file name, after what the figure holds: the
// case code (a list code in Meeting mode), the map's method and the plane.
func (u *UI) exportName() string {
	code := "brightfold"
	if u.cur >= 0 && u.cur < len(u.cases) {
		code = strings.ReplaceAll(u.shownCode(u.cur), " ", "-")
	}
	what := "scan"
	if u.open != nil && u.open.relevance != nil && u.scan.visibleOverlay() != nil {
		what = string(u.open.relevance.Method)
	}
	return fmt.Sprintf("%s-%s-%s.png", code, what, u.scan.order[0])
}

// exportView saves the current view as PNG.
func (u *UI) exportView() {
	img, err := u.exportImage()
	if err != nil {
		u.fail(err)
		return
	}
	u.saveExport(u.exportName(), func(w io.Writer) error { return png.Encode(w, img) })
}

// saveExport writes an export through write. Outside Meeting mode a save
// dialog asks where; in Meeting mode (where a file dialog would show folder
// names) it goes to the export folder and only the file name is shown.
func (u *UI) saveExport(name string, write func(io.Writer) error) {
	if u.meeting {
		dir, err := exportDir()
		if err != nil {
			u.fail(err)
			return
		}
		name = uniqueName(dir, name)
		if err := atomicfile.Write(filepath.Join(dir, name), write); err != nil {
			u.fail(err)
			return
		}
		u.say("Exported " + name + " to the Brightfold export folder.")
		return
	}
	d := dialog.NewFileSave(func(wc fyne.URIWriteCloser, err error) {
		if err != nil {
			u.fail(err)
			return
		}
		if wc == nil {
			return
		}
		path := wc.URI().Path()
		wc.Close()
		if err := atomicfile.Write(path, write); err != nil {
			u.fail(err)
			return
		}
		u.say("Exported " + filepath.Base(path))
	}, u.win)
	d.SetFileName(name)
	if dir, err := exportDir(); err == nil {
		if l, err := storage.ListerForURI(storage.NewFileURI(dir)); err == nil {
			d.SetLocation(l)
		}
	}
	d.Resize(fyne.NewSize(900, 640))
	d.Show()
}

// exportFolderName is the export folder's name in the home folder.
const exportFolderName = "Brightfold exports"

// exportDir is the folder for exported views: ~/Brightfold exports.
func exportDir() (string, error) {
	home, err := os.UserHomeDir()
	if err != nil {
		return "", fmt.Errorf("export: no home folder: %w", err)
	}
	dir := filepath.Join(home, exportFolderName)
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return "", fmt.Errorf("export: %w", err)
	}
	return dir, nil
}

// uniqueName returns name, or name with a number added, that is not yet in dir.
func uniqueName(dir, name string) string {
	ext := filepath.Ext(name)
	stem := name[:len(name)-len(ext)]
	for i := 1; ; i++ {
		if _, err := os.Stat(filepath.Join(dir, name)); os.IsNotExist(err) {
			return name
		}
		name = fmt.Sprintf("%s-%d%s", stem, i+1, ext)
	}
}
