package cohort

import (
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"brightfold/internal/inputerr"
)

// Kinds of cohort input.
const (
	KindBIDS     = "bids"
	KindFolder   = "folder"
	KindManifest = "manifest"
)

// Case is one scan of the cohort.
type Case struct {
	Participant string   // participant label without "sub-"
	Session     string   // session label without "ses-", or ""
	Paths       []string // the scan: one NIfTI file, or DICOM files or a DICOM folder
	Source      string   // the scan's path relative to the dataset root, slash-separated
	Entities    string   // output name stem: "sub-01_ses-1_acq-fast" (the source's entities)
	Suffix      string   // the source's BIDS suffix ("T1w"), or "" outside BIDS
	Label       int      // 1 positive, 0 negative, -1 unknown
	Split       string   // manifest split column, or ""
	Covariates  map[string]string
}

// Dataset is a cohort read from INPUT.
type Dataset struct {
	Kind        string
	Root        string // folder that Case.Source is relative to
	Name        string // the dataset's name (BIDS Name, or the folder or manifest name)
	BIDSVersion string // of a BIDS input, or ""
	Cases       []Case
	Covariates  []string // covariate column names, in input order
}

// Open reads INPUT: a BIDS dataset (a folder with dataset_description.json),
// a CSV manifest (a .csv file, or a folder holding a phantom cohort.csv), or
// a folder of scans. covariatesTSV, when not empty, adds or replaces
// covariates from a BIDS participants.tsv-style table.
func Open(input, covariatesTSV string) (*Dataset, error) {
	st, err := os.Stat(input)
	if err != nil {
		return nil, inputerr.Wrap(input, fmt.Errorf("cannot read the cohort input: %w", err))
	}
	var d *Dataset
	switch {
	case !st.IsDir():
		d, err = ReadManifestFile(input)
	case exists(filepath.Join(input, "dataset_description.json")):
		d, err = ReadBIDS(input)
	case exists(filepath.Join(input, "cohort.csv")):
		d, err = ReadManifestFile(filepath.Join(input, "cohort.csv"))
	default:
		d, err = ReadFolder(input)
	}
	if err != nil {
		return nil, err
	}
	if covariatesTSV != "" {
		if err := d.addCovariates(covariatesTSV); err != nil {
			return nil, err
		}
	}
	if len(d.Cases) == 0 {
		return nil, inputerr.New(input, "no scans found (want a BIDS dataset with sub-*/anat/*_T1w.nii[.gz], a folder of NIfTI files or DICOM folders, or a CSV manifest with a path column)")
	}
	return d, d.checkUnique()
}

func exists(p string) bool {
	_, err := os.Stat(p)
	return err == nil
}

// checkUnique refuses two cases with the same output name.
func (d *Dataset) checkUnique() error {
	seen := map[string]string{}
	for _, c := range d.Cases {
		if prev, ok := seen[c.Entities]; ok {
			return inputerr.New(d.Root, "%q and %q would both be written as %s: give them distinct participant or session labels", prev, c.Source, c.Entities)
		}
		seen[c.Entities] = c.Source
	}
	return nil
}

// Select keeps the cases of the given participant labels (with or without
// "sub-"); it refuses labels that match no case, naming them.
func (d *Dataset) Select(labels []string) error {
	if len(labels) == 0 {
		return nil
	}
	want := map[string]bool{}
	for _, l := range labels {
		want[strings.TrimPrefix(l, "sub-")] = false
	}
	var keep []Case
	for _, c := range d.Cases {
		if _, ok := want[c.Participant]; ok {
			want[c.Participant] = true
			keep = append(keep, c)
		}
	}
	var missing []string
	for l, found := range want {
		if !found {
			missing = append(missing, l)
		}
	}
	if len(missing) > 0 {
		sort.Strings(missing)
		return inputerr.New(d.Root, "--participant-label: no scans for %s", strings.Join(missing, ", "))
	}
	d.Cases = keep
	return nil
}

// Participants returns the distinct participant labels, sorted.
func (d *Dataset) Participants() []string {
	seen := map[string]bool{}
	var out []string
	for _, c := range d.Cases {
		if !seen[c.Participant] {
			seen[c.Participant] = true
			out = append(out, c.Participant)
		}
	}
	sort.Strings(out)
	return out
}

// sortCases orders cases by participant, session and source.
func sortCases(cs []Case) {
	sortByEntity(cs, func(c Case) (string, string, string) { return c.Participant, c.Session, c.Source })
}

// sortByEntity orders xs by the participant, session and source key gives.
func sortByEntity[T any](xs []T, key func(T) (part, ses, src string)) {
	sort.Slice(xs, func(i, j int) bool {
		ap, as, asrc := key(xs[i])
		bp, bs, bsrc := key(xs[j])
		if ap != bp {
			return ap < bp
		}
		if as != bs {
			return as < bs
		}
		return asrc < bsrc
	})
}

// bidsLabel turns a free-text code into a BIDS label (letters and digits
// only): "HMRU-0001" becomes "HMRU0001".
func bidsLabel(s string) string {
	var b strings.Builder
	for _, r := range s {
		if r < 128 && (r >= '0' && r <= '9' || r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z') {
			b.WriteRune(r)
		}
	}
	return b.String()
}
