// Package notice holds the research-use notice that every Brightfold screen,
// image, report and export carries.
package notice

// Full is the complete notice, shown on every screen and written into every output.
const Full = "Research use only. Not a diagnosis. Model output must be reviewed by a " +
	"licensed clinician and is not a substitute for clinical judgement or local regulations."

// Short fits fixed-width fields such as the 80-byte NIfTI description.
const Short = "Research use only. Not a diagnosis."
