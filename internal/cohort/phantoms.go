package cohort

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"

	"brightfold/internal/atomicfile"
	"brightfold/internal/notice"
	"brightfold/internal/phantom"
	"brightfold/internal/volume/nifti"
)

// WritePhantomBIDS writes the given demo subjects as a BIDS dataset in
// root: dataset_description.json, participants.tsv (label, age, sex, site)
// and sub-<case code>/anat/sub-<case code>_T1w.nii.gz rendered at voxelMM
// millimetres. Choosing which subjects enter plants a confound (for
// example: more positives from one site).
func WritePhantomBIDS(root string, subjects []phantom.Subject, voxelMM float64) error {
	if err := os.MkdirAll(root, 0o755); err != nil {
		return err
	}
	desc := map[string]any{"Name": "Harbourside Memory Research Unit demo cohort (synthetic phantoms)",
		"BIDSVersion": BIDSVersion, "DatasetType": "raw", "notice": notice.Full}
	if err := writeJSON(filepath.Join(root, DescriptionFile), desc); err != nil {
		return err
	}
	var tsv strings.Builder
	tsv.WriteString("participant_id\tlabel\tage\tsex\tsite\n")
	for _, s := range subjects {
		c, err := phantom.Render(s, phantom.Options{Shift: s.Shift, VoxelMM: voxelMM})
		if err != nil {
			return fmt.Errorf("phantom %s: %w", s.ID, err)
		}
		lab := bidsLabel(s.ID)
		p := filepath.Join(root, "sub-"+lab, "anat", "sub-"+lab+"_T1w.nii.gz")
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			return err
		}
		if err := nifti.Write(p, c.Volume, nifti.WriteOptions{}); err != nil {
			return err
		}
		fmt.Fprintf(&tsv, "sub-%s\t%d\t%.1f\t%s\t%s\n", lab, s.Label, s.Age, s.Sex, s.Site)
	}
	return atomicfile.WriteBytes(filepath.Join(root, "participants.tsv"), []byte(tsv.String()))
}

// ConfoundedSubjects picks demo subjects of cohort seed so that each site
// has the given numbers of positive and negative cases (site name →
// [positives, negatives]), drawing subjects in index order and skipping
// those a site no longer needs: the pattern's prevalence then differs by
// site, a planted site confound.
func ConfoundedSubjects(seed uint64, want map[string][2]int) []phantom.Subject {
	need := map[string][2]int{}
	total := 0
	for s, w := range want {
		need[s] = w
		total += w[0] + w[1]
	}
	var out []phantom.Subject
	for i := 0; len(out) < total && i < 100*total+1000; i++ {
		s := phantom.NewSubject(seed, i, phantom.ShiftNone)
		w, ok := need[s.Site]
		k := 1 - s.Label // 0 for a positive, 1 for a negative
		if !ok || w[k] == 0 {
			continue
		}
		w[k]--
		need[s.Site] = w
		out = append(out, s)
	}
	return out
}
