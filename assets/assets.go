// Package assets embeds the files Brightfold ships inside its binary: the
// demo model folder (model.onnx and card.json of the demo classifier trained
// on the synthetic phantoms of the invented Harbourside Memory Research
// Unit). `make demo-model` retrains the model folder from its seeds; see
// tools/traindemo. Research use only. Not a diagnosis.
package assets

import (
	"embed"
	"io/fs"
)

//go:embed demo-model/model.onnx demo-model/card.json
var demo embed.FS

// DemoModelFolderDir is the repository folder the demo model folder is embedded from.
const DemoModelFolderDir = "demo-model"

// DemoModelFolderName names the embedded model folder in messages and results.
const DemoModelFolderName = "embedded demo model folder"

// DemoModelFolder returns the demo model folder's files: a file system whose single
// top-level folder, DemoModelFolderDir, holds model.onnx and card.json, as a zip
// of a model folder folder has them; inference.LoadModelFolderFS reads it as it is.
func DemoModelFolder() fs.FS { return demo }

// DemoFile returns one file of the demo model folder ("model.onnx" or
// "card.json").
func DemoFile(name string) ([]byte, error) { return demo.ReadFile(DemoModelFolderDir + "/" + name) }
