// Package assets embeds the files Brightfold ships inside its binary: the
// demo model bundle (model.onnx and card.json of the demo classifier trained
// on the synthetic phantoms of the invented Harbourside Memory Research
// Unit). `make demo-model` retrains the bundle from its seeds; see
// tools/traindemo. Research use only. Not a diagnosis.
package assets

import (
	"embed"
	"io/fs"
)

//go:embed demo-bundle/model.onnx demo-bundle/card.json
var demo embed.FS

// DemoBundleDir is the repository folder the demo bundle is embedded from.
const DemoBundleDir = "demo-bundle"

// DemoBundleName names the embedded bundle in messages and results.
const DemoBundleName = "embedded demo bundle"

// DemoBundle returns the demo bundle's files: a file system whose single
// top-level folder, DemoBundleDir, holds model.onnx and card.json, as a zip
// of a bundle folder has them; inference.LoadBundleFS reads it as it is.
func DemoBundle() fs.FS { return demo }

// DemoFile returns one file of the demo bundle ("model.onnx" or
// "card.json").
func DemoFile(name string) ([]byte, error) { return demo.ReadFile(DemoBundleDir + "/" + name) }
