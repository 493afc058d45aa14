package main

import (
	"brightfold/assets"
	"brightfold/inference"
)

// defaultModelFolderName names the model folder evaluated without -model.
const defaultModelFolderName = assets.DemoModelFolderName

// loadModelFolder loads the model folder named by -model, or the embedded demo model folder
// (the one `brightfold score` uses without --model).
func loadModelFolder(p string) (*inference.ModelFolder, string, error) {
	if p == "" {
		b, err := inference.LoadModelFolderFS(assets.DemoModelFolder())
		return b, assets.DemoModelFolderName, err
	}
	b, err := inference.LoadModelFolder(p)
	return b, p, err
}
