package main

import (
	"brightfold/assets"
	"brightfold/inference"
)

// defaultBundleName names the bundle evaluated without -model.
const defaultBundleName = assets.DemoBundleName

// loadBundle loads the bundle named by -model, or the embedded demo bundle
// (the one `brightfold score` uses without --model).
func loadBundle(p string) (*inference.Bundle, string, error) {
	if p == "" {
		b, err := inference.LoadBundleFS(assets.DemoBundle())
		return b, assets.DemoBundleName, err
	}
	b, err := inference.LoadBundle(p)
	return b, p, err
}
