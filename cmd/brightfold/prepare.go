package main

import (
	"encoding/json"
	"fmt"
	"io"
	"os"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
	"brightfold/internal/volume"
	"brightfold/internal/volume/nifti"
)

// runPrepare writes what the model sees: the model-grid tensor of a scan as
// NIfTI with the grid's own affine (so it overlays on the scan in any
// neuroimaging viewer), or prints the default preprocessing spec.
func runPrepare(e *env, args []string) error {
	fs := newFlags(e, "prepare")
	model := fs.String("model", "", "model folder whose card's preprocessing to apply (default: the embedded demo model folder)")
	specPath := fs.String("spec", "", "preprocessing spec JSON (the card's \"preprocessing\" object) instead of a model folder")
	out := fs.String("out", "", "NIfTI file to write (.nii or .nii.gz)")
	printSpec := fs.Bool("print-spec", false, "print the default preprocessing spec as JSON (docs/card.md documents each field) and exit")
	volIndex := fs.Int("volume", 0, "volume of a 4D NIfTI input")
	series := fs.String("series", "", "DICOM series UID when the input holds several")
	fs.Usage = func() {
		fmt.Fprintln(e.stderr, "usage: brightfold prepare SCAN (--model MODEL | --spec SPEC.json) --out FILE.nii.gz\n       brightfold prepare --print-spec")
		fs.PrintDefaults()
	}
	paths, err := parseFlags(fs, args)
	if err != nil {
		return err
	}
	if *printSpec {
		fmt.Fprintln(e.stderr, notice.Full)
		return writeSpecJSON(e.stdout, preprocess.DefaultSpec())
	}
	if len(paths) == 0 || *out == "" {
		return usageError("brightfold prepare: give a scan and --out FILE.nii.gz (or --print-spec)")
	}
	if *model != "" && *specPath != "" {
		return usageError("brightfold prepare: give --model or --spec, not both")
	}
	spec, layout, err := prepareSpec(*model, *specPath)
	if err != nil {
		return err
	}
	v, err := volume.Load(paths, volume.LoadOptions{VolumeIndex: *volIndex, SeriesUID: *series})
	if err != nil {
		return err
	}
	pr, err := prepareScan(*model, *specPath, v, spec)
	if err != nil {
		if inputerr.Is(err) {
			return err
		}
		return inputerr.New(paths[0], "cannot be prepared: %v", err)
	}
	if err := nifti.Write(*out, pr.GridVolume(), nifti.WriteOptions{DataType: nifti.DTFloat32, Description: notice.Short}); err != nil {
		return inputerr.Wrap(*out, err)
	}
	g := pr.Transform.GridDims
	fmt.Fprintf(e.stdout, "%s\nwrote %s: model grid %d×%d×%d at %g×%g×%g mm, intensity %s (the model reads it in layout %s)\n",
		notice.Full, *out, g[0], g[1], g[2], spec.SpacingMm[0], spec.SpacingMm[1], spec.SpacingMm[2], spec.Intensity.Method, layout)
	return nil
}

// prepareSpec reads the spec from a spec file, a model folder's card, or the
// embedded demo model folder.
func prepareSpec(model, specPath string) (preprocess.Spec, string, error) {
	if specPath != "" {
		b, err := os.ReadFile(specPath)
		if err != nil {
			return preprocess.Spec{}, "", inputerr.Wrap(specPath, err)
		}
		if len(b) > inference.MaxCardBytes {
			return preprocess.Spec{}, "", inputerr.New(specPath, "larger than %d bytes", inference.MaxCardBytes)
		}
		s, err := preprocess.ParseSpec(b)
		if err != nil {
			return preprocess.Spec{}, "", inputerr.Wrap(specPath, err)
		}
		return s, preprocess.LayoutNCDHW, nil
	}
	mf, err := openModelFolder(model)
	if err != nil {
		return preprocess.Spec{}, "", err
	}
	return mf.Card.Preprocessing, mf.Card.Input.Layout, nil
}

func writeSpecJSON(w io.Writer, s preprocess.Spec) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	return enc.Encode(s)
}
