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

// OverlayFigure is the overlay.png figure: the scan's axial, coronal and
// sagittal planes through At with the relevance map drawn over them, a
// colour bar, title lines and the notice (which viewer.Montage always adds).
type OverlayFigure struct {
	Scan, Map *volume.Volume // on the same grid
	At        [3]float64     // RAS mm point the planes pass through (the map's peak)
	Signed    bool           // draw negative values too, with the diverging colour map
	Units     string         // colour bar label
	Title     []string       // lines above the planes; no identifiers
}

// Overlay display settings (our choice): the strongest tenth of the map's
// non-zero voxels is drawn, at 65 % opacity, with the colour scale
// saturating at the 99.5th percentile of the magnitudes so that a few
// extreme voxels do not wash out the rest.
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
	om, err := viewer.NewOverlayMap(sc, f.Map, f.Units)
	if err != nil {
		return nil, fmt.Errorf("overlay figure: %w", err)
	}
	style := viewer.OverlayStyle{
		Opacity:   overlayOpacity,
		Threshold: viewer.Threshold{Value: overlayShowAbove, Percentile: true},
		Signed:    f.Signed,
		Range:     om.Resolve(viewer.Threshold{Value: overlaySaturationPct, Percentile: true}),
	}
	img, err := viewer.Montage(sc, viewer.MontageSpec{
		At: f.At, Overlay: om, Style: style, Title: f.Title, Crosshair: true, Interp: viewer.Linear,
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
