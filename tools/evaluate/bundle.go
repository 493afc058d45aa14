package main

import (
	"brightfold/inference"
)

// defaultBundleName names the bundle evaluated without -model.
const defaultBundleName = "assets/demo-bundle"

// loadBundle loads the bundle named by -model, or the demo bundle.
func loadBundle(p string) (*inference.Bundle, string, error) {
	if p == "" {
		p = defaultBundleName
	}
	b, err := inference.LoadBundle(p)
	return b, p, err
}
