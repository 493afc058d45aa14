package app

import (
	"image/color"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/theme"
)

// Our palette: a dark "harbour ink" ground that keeps grey-scale images
// readable, a sea-glass accent for interaction, a warm chalk banner for the
// notice, and two unmistakable verdict colours for the fit check.
var (
	colInk        = color.NRGBA{0x12, 0x16, 0x1b, 0xff}
	colPanel      = color.NRGBA{0x1a, 0x20, 0x27, 0xff}
	colRaised     = color.NRGBA{0x24, 0x2c, 0x35, 0xff}
	colText       = color.NRGBA{0xe4, 0xe7, 0xea, 0xff}
	colMuted      = color.NRGBA{0x9a, 0xa6, 0xb1, 0xff}
	colSeaGlass   = color.NRGBA{0x5f, 0xb8, 0xa8, 0xff}
	colChalk      = color.NRGBA{0xec, 0xe1, 0xc6, 0xff}
	colChalkInk   = color.NRGBA{0x2a, 0x22, 0x14, 0xff}
	colOOD        = color.NRGBA{0xd8, 0x3a, 0x1e, 0xff} // vermilion: out-of-distribution
	colInDist     = color.NRGBA{0x2b, 0x6e, 0x60, 0xff} // deep teal: in-distribution
	colPending    = color.NRGBA{0x3a, 0x44, 0x50, 0xff}
	colMeeting    = color.NRGBA{0x7a, 0x5c, 0xc4, 0xff} // violet chip while Meeting mode is on
	colCrosshair  = color.NRGBA{0x7f, 0xe0, 0xcf, 0xb0}
	colLetter     = color.NRGBA{0xf5, 0xe6, 0xa8, 0xff}
	colImageField = color.NRGBA{0x00, 0x00, 0x00, 0xff}
	colBacking    = color.NRGBA{0x0b, 0x0e, 0x12, 0xa8}
)

// brightTheme is Brightfold's own theme on top of Fyne's default metrics.
type brightTheme struct{ base fyne.Theme }

func newTheme() fyne.Theme { return &brightTheme{base: theme.DefaultTheme()} }

// Color returns our palette, falling back to the dark default.
func (t *brightTheme) Color(n fyne.ThemeColorName, _ fyne.ThemeVariant) color.Color {
	switch n {
	case theme.ColorNameBackground:
		return colInk
	case theme.ColorNameForeground:
		return colText
	case theme.ColorNamePrimary, theme.ColorNameHyperlink:
		return colSeaGlass
	case theme.ColorNameForegroundOnPrimary:
		return colInk
	case theme.ColorNameButton:
		return colRaised
	case theme.ColorNameInputBackground, theme.ColorNameMenuBackground, theme.ColorNameOverlayBackground:
		return colPanel
	case theme.ColorNameHeaderBackground:
		return colRaised
	case theme.ColorNamePlaceHolder, theme.ColorNameDisabled:
		return colMuted
	case theme.ColorNameSeparator:
		return color.NRGBA{0x2e, 0x37, 0x41, 0xff}
	case theme.ColorNameSelection:
		return color.NRGBA{0x5f, 0xb8, 0xa8, 0x50}
	case theme.ColorNameFocus:
		return color.NRGBA{0x5f, 0xb8, 0xa8, 0x80}
	case theme.ColorNameHover:
		return color.NRGBA{0xff, 0xff, 0xff, 0x14}
	case theme.ColorNameError:
		return colOOD
	}
	return t.base.Color(n, theme.VariantDark)
}

// Font uses Fyne's bundled fonts.
func (t *brightTheme) Font(s fyne.TextStyle) fyne.Resource { return t.base.Font(s) }

// Icon uses Fyne's bundled icons.
func (t *brightTheme) Icon(n fyne.ThemeIconName) fyne.Resource { return t.base.Icon(n) }

// Size tightens padding a little so that the image area stays large.
func (t *brightTheme) Size(n fyne.ThemeSizeName) float32 {
	switch n {
	case theme.SizeNamePadding:
		return 4
	case theme.SizeNameInnerPadding:
		return 6
	}
	return t.base.Size(n)
}

// rgba converts a palette colour for viewer's drawing functions.
func rgba(c color.NRGBA) color.RGBA {
	r, g, b, a := c.RGBA()
	return color.RGBA{uint8(r >> 8), uint8(g >> 8), uint8(b >> 8), uint8(a >> 8)}
}
