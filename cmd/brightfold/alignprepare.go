package main

import (
	"context"
	"os"
	"os/signal"
	"path/filepath"

	"brightfold/inference/preprocess"
	"brightfold/internal/inputerr"
	"brightfold/internal/volume"
)

// prepareScan prepares v as spec states; when the spec aligns scans to a
// template, the template (and mask) come from the model folder, or for a
// spec file from beside it, and the scan is aligned first (Ctrl-C stops it).
func prepareScan(model, specPath string, v *volume.Volume, spec preprocess.Spec) (*preprocess.Prepared, error) {
	if !spec.Alignment.Active() {
		return preprocess.Prepare(v, spec)
	}
	var tpl, mask *volume.Volume
	if specPath != "" {
		dir := filepath.Dir(specPath)
		var err error
		if tpl, err = loadBeside(dir, spec.Alignment.Template); err != nil {
			return nil, err
		}
		if spec.Alignment.Mask != "" {
			if mask, err = loadBeside(dir, spec.Alignment.Mask); err != nil {
				return nil, err
			}
		}
	} else {
		mf, err := openModelFolder(model)
		if err != nil {
			return nil, err
		}
		tpl, mask = mf.Card.AlignmentTemplate()
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	return preprocess.PrepareAligned(ctx, v, spec, tpl, mask)
}

func loadBeside(dir, name string) (*volume.Volume, error) {
	p := filepath.Join(dir, name)
	v, err := volume.Load([]string{p}, volume.LoadOptions{})
	if err != nil {
		return nil, inputerr.Wrap(p, err)
	}
	return v, nil
}
