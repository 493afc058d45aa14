package report

import (
	"bytes"
	"fmt"
	"image"
	"image/png"

	"brightfold/internal/atomicfile"
	"brightfold/internal/volume"
	"brightfold/viewer"
)

// OverlayFigure is the overlay.png figure (viewer.Figure): a strip of
// slices across the part of the scan where the relevance map is strongest,
// beside the case code, the model, the fit-check verdict, the probability
// (or that it is withheld), the title lines, a locator of the cuts and the
// colour bar, with the notice across the top. The map is drawn as in the
// viewer's window: inside the head only, positive relevance with the
// sequential colour map (both signs with the diverging one when Signed), in
// per cent of its strongest voxel.
type OverlayFigure struct {
	Scan, Map *volume.Volume // on the same grid
	At        [3]float64     // RAS mm point used when the map is empty (the map's peak)
	Signed    bool           // draw negative values too, with the diverging colour map
	Units     string         // what the map's values are (kept in Title by callers; the bar shows % of the strongest)
	Title     []string       // lines under the headline; no identifiers

	Case     string // case code, no identifiers; may be empty
	Model    string // model name and version
	Verdict  string // fit-check verdict in words
	OOD      bool   // the verdict is out-of-distribution
	Headline string // the probability as shown, or that it is withheld
}

// Overlay display settings (our choice, as the window's defaults): the
// strongest tenth of the map's non-zero voxels is drawn, at 65 % opacity,
// with the colour scale saturating at the 99.5th percentile of the
// magnitudes so that a few extreme voxels do not wash out the rest.
const (
	overlayOpacity       = 0.65
	overlayShowAbove     = 90
	overlaySaturationPct = 99.5
)

// OverlayImage renders the figure.
func OverlayImage(f OverlayFigure) (image.Image, error) {
	sc, err := viewer.NewScene(f.Scan)
	if err != nil {
		return nil, fmt.Errorf("overlay figure: %w", err)
	}
	om, err := viewer.NewOverlayMap(sc, viewer.DisplayMap(f.Map, sc.HeadMask()), viewer.DisplayUnits)
	if err != nil {
		return nil, fmt.Errorf("overlay figure: %w", err)
	}
	style := viewer.OverlayStyle{
		Opacity:   overlayOpacity,
		Threshold: viewer.Threshold{Value: overlayShowAbove, Percentile: true},
		Signed:    f.Signed,
		Range:     om.Resolve(viewer.Threshold{Value: overlaySaturationPct, Percentile: true}),
	}
	img, err := viewer.Figure(sc, viewer.FigureSpec{
		At: f.At, Overlay: om, Style: style, Interp: viewer.Linear,
		Case: f.Case, Model: f.Model, Verdict: f.Verdict, OOD: f.OOD, Headline: f.Headline, Lines: f.Title,
	})
	if err != nil {
		return nil, fmt.Errorf("overlay figure: %w", err)
	}
	return img, nil
}

// WriteOverlayPNG renders the figure and writes it to path atomically.
func WriteOverlayPNG(path string, f OverlayFigure) error {
	img, err := OverlayImage(f)
	if err != nil {
		return err
	}
	var buf bytes.Buffer
	if err := png.Encode(&buf, img); err != nil {
		return fmt.Errorf("encode %s: %w", path, err)
	}
	return atomicfile.WriteBytes(path, buf.Bytes())
}
