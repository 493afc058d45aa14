// Package app is Brightfold's desktop viewer: the Fyne window with the
// "Cases", "Scan", "Evidence", "Fit check" and "My read" panels, the notice
// banner, Meeting mode, and the background tasks that load scans and run the
// model. It is the only package that imports Fyne; everything it shows is
// computed by the GUI-free packages (volume, viewer, inference, overlay,
// phantom). Research use only.
package app

import (
	"errors"
	"fmt"
	"image"
	"image/png"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"time"

	"fyne.io/fyne/v2"
	fyneapp "fyne.io/fyne/v2/app"

	"brightfold/internal/atomicfile"
	"brightfold/internal/inputerr"
)

// Options configure one run of the viewer.
type Options struct {
	// Paths are scans or folders to open; none opens the demo cohort.
	Paths []string
	// Screenshot, when set, saves the rendered window as a PNG file once the
	// first case is on screen with its evidence, then quits.
	Screenshot string
	// Meeting starts the viewer in Meeting mode.
	Meeting bool
	// Model is a model folder (folder or .zip); empty means the embedded demo model.
	Model string
	// DemoCases is the number of in-distribution demo cases made on first
	// start (one of each shifted variant is added); 0 means 12.
	DemoCases int
	// DemoDir is the demo cohort folder; empty means DefaultDemoDir().
	DemoDir string
	// Session is a reading session file (brightfold session new): its cases
	// become the worklist and "My read" records the reads.
	Session string
	// ScreenshotTimeout bounds the wait for content before a screenshot is
	// taken anyway (and reported as incomplete); 0 means 10 minutes.
	ScreenshotTimeout time.Duration
}

// DefaultDemoDir is where the demo cohort is generated on first start:
// the user's cache folder, brightfold/demo.
func DefaultDemoDir() (string, error) {
	dir, err := os.UserCacheDir()
	if err != nil {
		return "", fmt.Errorf("no cache folder for the demo cohort: %w", err)
	}
	return filepath.Join(dir, "brightfold", "demo"), nil
}

// windowSize is the window's preferred opening size, used in full on a
// screen large enough (and by the tests); fitWindow shrinks it to the screen.
var windowSize = fyne.NewSize(1600, 960)

// minWindow is the smallest size the layout is made for: a 1280×800 screen
// less a task bar and the window's title bar.
var minWindow = fyne.NewSize(1240, 720)

// fitWindow is the opening size on a screen of the given size (zero when
// unknown): the preferred size, or the screen less room for a task bar and
// window decorations, whichever is smaller, but never below minWindow.
func fitWindow(screen fyne.Size) fyne.Size {
	if screen.Width <= 0 || screen.Height <= 0 {
		return windowSize
	}
	w := min32(windowSize.Width, screen.Width)
	h := min32(windowSize.Height, screen.Height-48)
	return fyne.NewSize(max32(w, min32(minWindow.Width, screen.Width)), max32(h, min32(minWindow.Height, screen.Height)))
}

// Run opens the viewer window and returns when it is closed (or, with
// Options.Screenshot, when the screenshot is saved).
func Run(opts Options) error {
	if err := checkDisplay(); err != nil {
		return err
	}
	if opts.DemoDir == "" {
		d, err := DefaultDemoDir()
		if err != nil {
			return err
		}
		opts.DemoDir = d
	}
	a := fyneapp.NewWithID("org.brightfold.viewer")
	a.Settings().SetTheme(newTheme())
	w := a.NewWindow("Brightfold")
	u := newUI(a, w, opts, fyne.Do)
	w.SetContent(u.root)
	w.Resize(fitWindow(screenSize()))
	w.SetOnDropped(u.dropped)
	u.installShortcuts()
	var shotErr error
	if opts.Screenshot != "" {
		go func() { shotErr = u.screenshotWhenReady(opts) }()
	}
	u.start()
	w.ShowAndRun()
	u.close()
	return shotErr
}

// checkDisplay refuses to start without a display, where the window
// toolkit would fail with an obscure message.
func checkDisplay() error {
	if runtime.GOOS != "linux" && runtime.GOOS != "freebsd" {
		return nil
	}
	if os.Getenv("DISPLAY") == "" && os.Getenv("WAYLAND_DISPLAY") == "" {
		return inputerr.New("", "no display: the viewer needs a desktop session (DISPLAY or WAYLAND_DISPLAY is empty); "+
			"run it under xvfb-run for a screenshot, or `make demo` for the headless demo")
	}
	return nil
}

// screenshotWhenReady waits for the first case to be shown with its
// evidence, lets the window paint, captures it, saves it and quits.
func (u *UI) screenshotWhenReady(opts Options) error {
	timeout := opts.ScreenshotTimeout
	if timeout <= 0 {
		timeout = 10 * time.Minute
	}
	var waitErr error
	select {
	case <-u.ready:
	case <-time.After(timeout):
		waitErr = fmt.Errorf("screenshot: content not ready after %v; saved what was on screen", timeout)
	}
	time.Sleep(3 * time.Second) // a few frames so the last refresh is painted
	var img image.Image
	var stateErr error
	var timings []string
	fyne.DoAndWait(func() {
		img = u.win.Canvas().Capture()
		stateErr = u.completeness()
		timings = u.timings
	})
	for _, t := range timings {
		fmt.Fprintln(os.Stderr, "brightfold view: "+t)
	}
	var err error
	if img, err = opaque(img); err == nil {
		err = savePNG(opts.Screenshot, img)
	}
	fyne.Do(u.app.Quit)
	return errors.Join(waitErr, stateErr, err)
}

// completeness says what is missing from the screen for a full reading
// view: a case, its score and, unless none was asked for, its relevance map.
func (u *UI) completeness() error {
	switch {
	case u.open == nil:
		return fmt.Errorf("screenshot: no case on screen (%s)", u.message.Text)
	case u.open.result == nil && u.model.missing():
		return nil // a build without the embedded model says so on screen
	case u.open.result == nil:
		return fmt.Errorf("screenshot: %s has no score (%s)", u.open.c.Code, u.evidence.status.Text)
	}
	// A withheld map (the fit check fails) or a slow method waiting for
	// Compute is what the screen should show.
	if _, want := u.evidence.selectedMethod(); want && u.scan.overlay == nil && !u.withheld(u.open) && !u.evidence.compute.Visible() {
		return fmt.Errorf("screenshot: %s has no relevance map (%s)", u.open.c.Code, u.evidence.ovState.Text)
	}
	return nil
}

// opaque copies a captured window into an opaque RGBA image. OpenGL read-back
// leaves alpha 0 where the framebuffer has no alpha channel, which would make
// the PNG transparent; an image with no non-black pixel means the driver
// returned nothing (some software rasterisers cannot read the front buffer).
func opaque(img image.Image) (*image.RGBA, error) {
	if img == nil {
		return nil, errors.New("the window could not be captured")
	}
	b := img.Bounds()
	out := image.NewRGBA(image.Rect(0, 0, b.Dx(), b.Dy()))
	lit := false
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			r, g, bl, _ := img.At(x, y).RGBA()
			i := out.PixOffset(x-b.Min.X, y-b.Min.Y)
			out.Pix[i], out.Pix[i+1], out.Pix[i+2], out.Pix[i+3] = uint8(r>>8), uint8(g>>8), uint8(bl>>8), 255
			lit = lit || r|g|bl != 0
		}
	}
	if !lit {
		return nil, errors.New("the graphics driver returned an empty image of the window " +
			"(under Xvfb, set GALLIUM_DRIVER=softpipe)")
	}
	return out, nil
}

// savePNG writes img atomically.
func savePNG(path string, img image.Image) error {
	if img == nil {
		return fmt.Errorf("%s: nothing captured", path)
	}
	return atomicfile.Write(path, func(w io.Writer) error { return png.Encode(w, img) })
}
