package cohort

import (
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"brightfold/internal/inputerr"
	"brightfold/internal/manifest"
	"brightfold/internal/volume/nifti"
)

// BIDSSuffix is the suffix of the scans a sweep reads from a BIDS dataset.
const BIDSSuffix = "T1w"

// ReadBIDS reads a BIDS dataset: dataset_description.json, every
// sub-<label>/[ses-<label>/]anat/*_T1w.nii[.gz], and participants.tsv when
// present (participant_id, an optional label column of 1/0, and the other
// columns as covariates; BIDS 1.9, "Participants file").
func ReadBIDS(root string) (*Dataset, error) {
	d := &Dataset{Kind: KindBIDS, Root: root, Name: filepath.Base(root)}
	descPath := filepath.Join(root, "dataset_description.json")
	b, err := manifest.ReadBounded(descPath)
	if err != nil {
		return nil, err
	}
	var desc struct{ Name, BIDSVersion string }
	if err := json.Unmarshal(b, &desc); err != nil {
		return nil, inputerr.Wrap(descPath, fmt.Errorf("not valid JSON: %w", err))
	}
	if desc.Name != "" {
		d.Name = desc.Name
	}
	d.BIDSVersion = desc.BIDSVersion
	subs, err := filepath.Glob(filepath.Join(root, "sub-*"))
	if err != nil {
		return nil, inputerr.Wrap(root, err)
	}
	for _, sub := range subs {
		cs, err := bidsSubject(root, sub)
		if err != nil {
			return nil, err
		}
		d.Cases = append(d.Cases, cs...)
	}
	if p := filepath.Join(root, "participants.tsv"); exists(p) {
		if err := d.addCovariates(p); err != nil {
			return nil, err
		}
	}
	sortCases(d.Cases)
	return d, nil
}

func bidsSubject(root, sub string) ([]Case, error) {
	if st, err := os.Stat(sub); err != nil || !st.IsDir() {
		return nil, nil
	}
	anats := []string{filepath.Join(sub, "anat")}
	sess, _ := filepath.Glob(filepath.Join(sub, "ses-*", "anat"))
	anats = append(anats, sess...)
	var out []Case
	for _, dir := range anats {
		ents, err := os.ReadDir(dir)
		if errors.Is(err, fs.ErrNotExist) {
			continue
		}
		if err != nil {
			return nil, inputerr.Wrap(dir, err)
		}
		for _, e := range ents {
			c, ok, err := bidsCase(root, dir, e.Name())
			if err != nil {
				return nil, err
			}
			if ok {
				out = append(out, c)
			}
		}
	}
	return out, nil
}

func bidsCase(root, dir, name string) (Case, bool, error) {
	stem, ok := strings.CutSuffix(name, ".nii.gz")
	if !ok {
		if stem, ok = strings.CutSuffix(name, ".nii"); !ok {
			return Case{}, false, nil
		}
	}
	ents, suffix, err := ParseBIDSName(stem)
	if err != nil {
		return Case{}, false, inputerr.Wrap(filepath.Join(dir, name), err)
	}
	if suffix != BIDSSuffix {
		return Case{}, false, nil
	}
	p := filepath.Join(dir, name)
	rel, _ := filepath.Rel(root, p)
	c := Case{Participant: ents[0][1], Paths: []string{p}, Source: filepath.ToSlash(rel), Suffix: suffix,
		Label: -1, Covariates: map[string]string{}}
	parts := make([]string, len(ents))
	for i, kv := range ents {
		if kv[0] == "ses" {
			c.Session = kv[1]
		}
		parts[i] = kv[0] + "-" + kv[1]
	}
	if want := "sub-" + c.Participant; !strings.Contains(filepath.ToSlash(rel), want+"/") {
		return Case{}, false, inputerr.New(p, "file of %s is not in the %s folder", want, want)
	}
	c.Entities = strings.Join(parts, "_")
	return c, true, nil
}

// ParseBIDSName splits a BIDS file name stem ("sub-01_ses-1_T1w") into its
// key-value entities, the first of which must be sub, and its suffix.
// Labels must be letters and digits (BIDS 1.9, "Entities").
func ParseBIDSName(stem string) (entities [][2]string, suffix string, err error) {
	parts := strings.Split(stem, "_")
	if len(parts) < 2 {
		return nil, "", fmt.Errorf("BIDS name %q: want sub-<label>_..._<suffix>", stem)
	}
	suffix = parts[len(parts)-1]
	if suffix == "" || bidsLabel(suffix) != suffix {
		return nil, "", fmt.Errorf("BIDS name %q: suffix %q is not letters and digits", stem, suffix)
	}
	seen := map[string]bool{}
	for i, p := range parts[:len(parts)-1] {
		k, v, ok := strings.Cut(p, "-")
		if !ok || k == "" || v == "" || bidsLabel(k) != k || bidsLabel(v) != v {
			return nil, "", fmt.Errorf("BIDS name %q: %q is not a key-label entity", stem, p)
		}
		if i == 0 && k != "sub" {
			return nil, "", fmt.Errorf("BIDS name %q: does not start with sub-<label>", stem)
		}
		if seen[k] {
			return nil, "", fmt.Errorf("BIDS name %q: entity %q appears twice", stem, k)
		}
		seen[k] = true
		entities = append(entities, [2]string{k, v})
	}
	return entities, suffix, nil
}

// ParseParticipants reads a participants.tsv table: a header row with
// participant_id (values with or without "sub-") and further columns. It
// returns the column names (as written) after participant_id and one map per
// participant label. "n/a" cells are kept as written.
func ParseParticipants(b []byte) ([]string, map[string]map[string]string, error) {
	r := manifest.NewCSVReader(b)
	r.Comma, r.LazyQuotes, r.FieldsPerRecord = '\t', true, -1
	var h manifest.Header
	var cols []string
	rows := map[string]map[string]string{}
	err := manifest.ReadTable(r, "participants table", func(hd manifest.Header) error {
		h = hd
		if !h.Has("participant_id") {
			return errors.New("no participant_id column in the header")
		}
		for i, n := range h.Raw {
			if h.Names[i] != "participant_id" && n != "" && h.Names[i] != "notice" {
				cols = append(cols, n)
			}
		}
		return nil
	}, func(line int, f []string) error {
		if len(f) == 1 && strings.TrimSpace(f[0]) == "" {
			return nil
		}
		if len(f) != len(h.Raw) {
			return fmt.Errorf("line %d has %d columns, the header %d", line, len(f), len(h.Raw))
		}
		id := bidsLabel(strings.TrimPrefix(h.Cell(f, "participant_id"), "sub-"))
		if id == "" {
			return fmt.Errorf("line %d: empty participant_id", line)
		}
		if _, dup := rows[id]; dup {
			return fmt.Errorf("line %d: participant %s appears twice", line, id)
		}
		row := map[string]string{}
		for i, n := range h.Raw {
			if h.Names[i] != "participant_id" && n != "" {
				row[n] = strings.TrimSpace(f[i])
			}
		}
		rows[id] = row
		return nil
	})
	if err != nil {
		return nil, nil, err
	}
	return cols, rows, nil
}

// addCovariates merges a participants table into the cases: its label
// column sets the label, the other columns are covariates.
func (d *Dataset) addCovariates(path string) error {
	b, err := manifest.ReadBounded(path)
	if err != nil {
		return err
	}
	cols, rows, err := ParseParticipants(b)
	if err != nil {
		return inputerr.Wrap(path, err)
	}
	have := map[string]bool{}
	for _, c := range d.Covariates {
		have[c] = true
	}
	for _, c := range cols {
		if c != "label" && !have[c] {
			d.Covariates = append(d.Covariates, c)
		}
	}
	for i := range d.Cases {
		row, ok := rows[d.Cases[i].Participant]
		if !ok {
			continue
		}
		for k, v := range row {
			if k != "label" {
				d.Cases[i].Covariates[k] = v
				continue
			}
			l, ok := manifest.Binary(v)
			if !ok {
				return inputerr.New(path, "participant %s: label %q: want 1 or 0 (or n/a)", d.Cases[i].Participant, v)
			}
			d.Cases[i].Label = l
		}
	}
	return nil
}

// ReadFolder reads a folder of scans: every NIfTI file (.nii, .nii.gz,
// .hdr) and every folder of DICOM files is one case, named after the first
// folder below root (or the file name at the top level). Folders named
// derivatives or holding a dataset_description.json (such as a sweep's
// OUTDIR inside the input) are not read.
func ReadFolder(root string) (*Dataset, error) {
	d := &Dataset{Kind: KindFolder, Root: root, Name: filepath.Base(root)}
	dicomDirs := map[string]bool{}
	err := filepath.WalkDir(root, func(p string, e fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if strings.HasPrefix(e.Name(), ".") && p != root {
			if e.IsDir() {
				return filepath.SkipDir
			}
			return nil
		}
		if e.IsDir() {
			if p != root && (e.Name() == "derivatives" || exists(filepath.Join(p, DescriptionFile))) {
				return filepath.SkipDir // a sweep's own outputs, or another dataset's
			}
			return nil
		}
		if nifti.IsPath(p) && !strings.HasSuffix(strings.ToLower(p), ".img") {
			d.Cases = append(d.Cases, folderCase(root, p))
		} else if strings.EqualFold(filepath.Ext(p), ".dcm") {
			dicomDirs[filepath.Dir(p)] = true
		}
		return nil
	})
	if err != nil {
		return nil, inputerr.Wrap(root, err)
	}
	dirs := make([]string, 0, len(dicomDirs))
	for p := range dicomDirs {
		dirs = append(dirs, p)
	}
	sort.Strings(dirs)
	for _, p := range dirs {
		d.Cases = append(d.Cases, folderCase(root, p))
	}
	folderDisambiguate(d.Cases)
	sortCases(d.Cases)
	return d, nil
}

// folderDisambiguate names cases that share a folder after their whole
// relative path instead.
func folderDisambiguate(cs []Case) {
	n := map[string]int{}
	for _, c := range cs {
		n[c.Participant]++
	}
	for i, c := range cs {
		if n[c.Participant] > 1 {
			cs[i].Participant = bidsLabel(strings.TrimSuffix(c.Source, ".gz"))
			cs[i].Entities = entityStem(cs[i].Participant, "")
		}
	}
}

func folderCase(root, p string) Case {
	rel, _ := filepath.Rel(root, p)
	rel = filepath.ToSlash(rel)
	name := rel
	if first, rest, ok := strings.Cut(rel, "/"); ok {
		name = first
		if bidsLabel(first) == "" {
			name = rest
		}
	} else {
		name = strings.TrimSuffix(strings.TrimSuffix(name, ".gz"), filepath.Ext(strings.TrimSuffix(name, ".gz")))
	}
	part := bidsLabel(name)
	if part == "" {
		part = "x" + fmt.Sprintf("%08x", fnv32(rel))
	}
	c := Case{Participant: part, Paths: []string{p}, Source: rel, Label: -1, Covariates: map[string]string{}}
	c.Entities = entityStem(part, "")
	return c
}

// fnv32 is the 32-bit FNV-1a hash of s.
func fnv32(s string) uint32 {
	h := uint32(2166136261)
	for i := 0; i < len(s); i++ {
		h ^= uint32(s[i])
		h *= 16777619
	}
	return h
}
