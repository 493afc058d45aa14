package phantom

import (
	"bufio"
	"bytes"
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"sync"

	"github.com/klauspost/compress/gzip"

	"brightfold/internal/atomicfile"
	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
	"brightfold/internal/parallel"
	"brightfold/internal/volume/dicom"
	"brightfold/internal/volume/nifti"
)

// Cohort lists the subjects of a cohort: n in-distribution cases (indices
// 0..n-1), then, when shifts is set, max(1, n/10) cases of each shift in
// the order of Shifts, with the following indices. Render each with
// Render(s, Options{Shift: s.Shift}) or Generate(seed, s.Index, ...).
func Cohort(seed uint64, n int, shifts bool) []Subject {
	if n < 0 {
		n = 0
	}
	out := make([]Subject, 0, n)
	for i := 0; i < n; i++ {
		out = append(out, NewSubject(seed, i, ShiftNone))
	}
	if !shifts {
		return out
	}
	per := max(1, n/10)
	idx := n
	for _, sh := range Shifts() {
		for c := 0; c < per; c++ {
			out = append(out, NewSubject(seed, idx, sh))
			idx++
		}
	}
	return out
}

// CohortColumns returns the columns of cohort.csv (a new slice on each
// call). Paths are relative to the cohort folder; dicom_path is empty for
// cases written as NIfTI only. The last column repeats the research-use
// notice on every row, so that the notice travels with any copy of the
// table.
func CohortColumns() []string {
	return []string{"case_id", "nifti_path", "dicom_path", "mask_path", "label",
		"severity", "age", "sex", "site", "shift", "head_scale", "notice"}
}

// CohortFile and NoticeFile are the names of the table and the notice in a cohort folder.
const (
	CohortFile = "cohort.csv"
	NoticeFile = "NOTICE.txt"
)

// WriteOptions control WriteCohort.
type WriteOptions struct {
	N       int    // in-distribution cases
	Seed    uint64 // cohort seed
	Shifts  bool   // add the shifted variants
	VoxelMM float64
	// DICOMEvery writes a DICOM series for every DICOMEvery-th
	// in-distribution case (indices 0, DICOMEvery, ...) and for every
	// shifted case; 0 means 5, a negative value none.
	DICOMEvery int
	// Workers is the number of cases made at once; 0 means one per CPU.
	Workers int
	// Progress receives one line per finished case; nil for none.
	Progress io.Writer
	// Context, when set, stops the writing when it is done (for example on
	// an interrupt): nothing is left behind.
	Context context.Context
}

// Row is one line of cohort.csv.
type Row struct {
	Subject   Subject
	NIfTIPath string
	DICOMPath string
	MaskPath  string
}

func (r Row) record() []string {
	s := r.Subject
	return []string{s.ID, r.NIfTIPath, r.DICOMPath, r.MaskPath, strconv.Itoa(s.Label),
		strconv.FormatFloat(s.Severity, 'f', 4, 64), strconv.FormatFloat(s.Age, 'f', 1, 64),
		s.Sex, s.Site, string(s.Shift), strconv.FormatFloat(s.HeadScale, 'f', 4, 64), notice.Full}
}

// WriteCohort writes the cohort into dir: per case CASE/t1.nii.gz (ct.nii.gz
// or t2.nii.gz for those shifts), CASE/mask.nii.gz and for some cases
// CASE/dicom/, plus cohort.csv and NOTICE.txt. The folder appears complete
// or not at all: everything is written into a temporary sibling that is
// renamed into place. An existing cohort folder is replaced; an existing
// non-empty folder that is not a cohort is refused.
func WriteCohort(dir string, opts WriteOptions) ([]Row, error) {
	if opts.N < 1 {
		return nil, inputerr.New(dir, "cohort size %d is less than 1", opts.N)
	}
	if opts.N > 100000 {
		return nil, inputerr.New(dir, "cohort size %d is more than 100000", opts.N)
	}
	if _, err := gridFor(ShiftNone, voxelOr1(opts.VoxelMM)); err != nil {
		return nil, inputerr.Wrap(dir, err)
	}
	abs, err := filepath.Abs(dir)
	if err != nil {
		return nil, inputerr.Wrap(dir, err)
	}
	if filepath.Dir(abs) == abs {
		return nil, inputerr.New(dir, "cannot write a cohort over the root folder")
	}
	if err := checkTarget(dir); err != nil {
		return nil, err
	}
	dir = abs
	parent := filepath.Dir(filepath.Clean(dir))
	if err := os.MkdirAll(parent, 0o755); err != nil {
		return nil, inputerr.Wrap(parent, err)
	}
	tmp, err := os.MkdirTemp(parent, "."+filepath.Base(dir)+".tmp-")
	if err == nil {
		err = os.Chmod(tmp, 0o755)
	}
	if err != nil {
		return nil, fmt.Errorf("make temporary cohort folder: %w", err)
	}
	done := false
	defer func() {
		if !done {
			os.RemoveAll(tmp)
		}
	}()
	rows, err := writeCases(tmp, opts)
	if err != nil {
		return nil, err
	}
	if err := writeTable(filepath.Join(tmp, CohortFile), rows); err != nil {
		return nil, err
	}
	if err := atomicfile.WriteBytes(filepath.Join(tmp, NoticeFile), noticeText(opts)); err != nil {
		return nil, err
	}
	if err := replaceDir(tmp, dir); err != nil {
		return nil, err
	}
	done = true
	return rows, nil
}

func voxelOr1(v float64) float64 {
	if v == 0 {
		return 1
	}
	return v
}

// checkTarget refuses a target that exists and is neither an empty folder nor a cohort.
func checkTarget(dir string) error {
	fi, err := os.Stat(dir)
	if errors.Is(err, os.ErrNotExist) {
		return nil
	}
	if err != nil {
		return inputerr.Wrap(dir, err)
	}
	if !fi.IsDir() {
		return inputerr.New(dir, "exists and is not a folder")
	}
	ents, err := os.ReadDir(dir)
	if err != nil {
		return inputerr.Wrap(dir, err)
	}
	if len(ents) == 0 || IsCohort(dir) {
		return nil
	}
	return inputerr.New(dir, "folder is not empty and is not a demo cohort (no %s with the cohort columns); refusing to overwrite it", CohortFile)
}

// IsCohort reports whether dir holds a cohort written by WriteCohort.
func IsCohort(dir string) bool {
	f, err := os.Open(filepath.Join(dir, CohortFile))
	if err != nil {
		return false
	}
	defer f.Close()
	rec, err := csv.NewReader(bufio.NewReader(io.LimitReader(f, 1<<16))).Read()
	cols := CohortColumns()
	if err != nil || len(rec) != len(cols) {
		return false
	}
	for i, c := range cols {
		if rec[i] != c {
			return false
		}
	}
	_, err = os.Stat(filepath.Join(dir, NoticeFile))
	return err == nil
}

// replaceDir renames tmp to dir, moving an existing dir aside first and
// deleting it only once the new one is in place.
func replaceDir(tmp, dir string) error {
	old := ""
	if _, err := os.Stat(dir); err == nil {
		old = tmp + ".old"
		if err := os.Rename(dir, old); err != nil {
			return fmt.Errorf("move the old cohort aside: %w", err)
		}
	}
	if err := os.Rename(tmp, dir); err != nil {
		if old != "" {
			os.Rename(old, dir)
		}
		return fmt.Errorf("move the new cohort into place: %w", err)
	}
	if old != "" {
		if err := os.RemoveAll(old); err != nil {
			return fmt.Errorf("remove the old cohort %s: %w", old, err)
		}
	}
	return nil
}

// writeCases renders and writes every case, several at once, and returns
// the rows in cohort order.
func writeCases(root string, opts WriteOptions) ([]Row, error) {
	subs := Cohort(opts.Seed, opts.N, opts.Shifts)
	rows := make([]Row, len(subs))
	var mu sync.Mutex // serialises progress lines
	done := 0
	err := parallel.EachErr(len(subs), opts.Workers, func(_, i int) error {
		if opts.Context != nil && opts.Context.Err() != nil {
			return errStopped
		}
		r, err := writeCase(root, subs[i], opts)
		if err != nil {
			return err
		}
		rows[i] = r
		if opts.Progress != nil {
			mu.Lock()
			done++
			s := subs[i]
			fmt.Fprintf(opts.Progress, "phantom: %s written (shift %s, label %d) [%d/%d]\n", s.ID, s.Shift, s.Label, done, len(subs))
			mu.Unlock()
		}
		return nil
	})
	if err != nil && !errors.Is(err, errStopped) {
		return nil, err
	}
	if opts.Context != nil && opts.Context.Err() != nil {
		return nil, fmt.Errorf("cohort not written: %w", context.Cause(opts.Context))
	}
	return rows, nil
}

// errStopped marks cases skipped because the context was cancelled.
var errStopped = errors.New("stopped: the context was cancelled")

// scanName is the NIfTI file name of a case's scan.
func scanName(sh Shift) string {
	switch sh {
	case ShiftCT:
		return "ct.nii.gz"
	case ShiftT2:
		return "t2.nii.gz"
	}
	return "t1.nii.gz"
}

func wantsDICOM(s Subject, every int) bool {
	if every == 0 {
		every = 5
	}
	if every < 0 {
		return false
	}
	return s.Shift != ShiftNone || s.Index%every == 0
}

// writeCase renders one case and writes its files under root/ID.
func writeCase(root string, s Subject, opts WriteOptions) (Row, error) {
	c, err := Render(s, Options{Shift: s.Shift, VoxelMM: opts.VoxelMM, Workers: 1})
	if err != nil {
		return Row{}, err
	}
	dir := filepath.Join(root, s.ID)
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return Row{}, fmt.Errorf("make case folder: %w", err)
	}
	row := Row{Subject: s, NIfTIPath: s.ID + "/" + scanName(s.Shift), MaskPath: s.ID + "/mask.nii.gz"}
	// Most bytes of a noisy scan are noise, which LZ77 matching cannot
	// shorten: Huffman-only coding is much faster than the default level for
	// a file a few percent larger. In masks, long runs of zeros make the
	// fastest LZ77 level the right one.
	if err := nifti.Write(filepath.Join(root, row.NIfTIPath), c.Volume,
		nifti.WriteOptions{DataType: nifti.DTInt16, Description: notice.Short, GzipLevel: gzip.HuffmanOnly}); err != nil {
		return Row{}, err
	}
	if err := nifti.Write(filepath.Join(root, row.MaskPath), c.Mask,
		nifti.WriteOptions{DataType: nifti.DTUint8, Description: notice.Short, GzipLevel: gzip.BestSpeed}); err != nil {
		return Row{}, err
	}
	if wantsDICOM(s, opts.DICOMEvery) {
		row.DICOMPath = s.ID + "/dicom"
		if err := dicom.WriteSeries(filepath.Join(root, row.DICOMPath), c.Volume, DICOMOptions(c)); err != nil {
			return Row{}, err
		}
	}
	return row, nil
}

// DICOMOptions are the fictional identifiers and acquisition tags with
// which a case is written as a DICOM series.
func DICOMOptions(c *Case) dicom.WriteOptions {
	s, m := c.Subject, c.Volume.Meta
	return dicom.WriteOptions{
		Seed:              s.ID + "/" + string(s.Shift) + "/" + strconv.FormatUint(s.Seed, 10),
		PatientName:       c.Volume.Patient.Name,
		PatientID:         c.Volume.Patient.ID,
		PatientSex:        s.Sex,
		PatientAge:        fmt.Sprintf("%03dY", int(s.Age)),
		StudyDate:         "20260301",
		StudyTime:         "090000",
		AccessionNumber:   fmt.Sprintf("HMRUA%04d", s.Index+1),
		StudyID:           strconv.Itoa(s.Index + 1),
		StudyDescription:  "Harbourside demo cohort (synthetic phantom)",
		Modality:          m.Modality,
		Manufacturer:      m.Manufacturer,
		ManufacturerModel: "synthetic head phantom",
		InstitutionName:   c.Volume.Patient.Institution,
		SeriesDescription: m.SeriesDescription,
		SeriesNumber:      1,
		ProtocolName:      m.SeriesDescription,
		BodyPartExamined:  "HEAD",
		FieldStrengthT:    m.FieldStrengthT,
		RepetitionTimeMs:  m.RepetitionTimeMs,
		EchoTimeMs:        m.EchoTimeMs,
		InversionTimeMs:   m.InversionTimeMs,
		FlipAngleDeg:      m.FlipAngleDeg,
		SliceThicknessMm:  m.SliceThicknessMm,
		WindowCenter:      m.WindowCenter,
		WindowWidth:       m.WindowWidth,
	}
}

func writeTable(path string, rows []Row) error {
	var buf bytes.Buffer
	w := csv.NewWriter(&buf)
	w.Write(CohortColumns())
	for _, r := range rows {
		w.Write(r.record())
	}
	w.Flush()
	if err := w.Error(); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	return atomicfile.WriteBytes(path, buf.Bytes())
}

func noticeText(opts WriteOptions) []byte {
	var b bytes.Buffer
	fmt.Fprintln(&b, notice.Full)
	fmt.Fprintln(&b)
	fmt.Fprintf(&b, "Harbourside demo cohort: synthetic head phantoms made by Brightfold (seed %d, %d in-distribution cases", opts.Seed, opts.N)
	if opts.Shifts {
		fmt.Fprint(&b, ", plus shifted variants")
	}
	fmt.Fprintln(&b, ").")
	fmt.Fprintln(&b, "No real person, scan or institution is depicted; identifiers such as DEMO^SUBJECT0001 are fictional.")
	fmt.Fprintln(&b, "cohort.csv: one row per case; paths are relative to this folder; label 1 means the atrophy pattern is present;")
	fmt.Fprintln(&b, "shift is \"none\" for in-distribution cases; the last column repeats the notice above.")
	fmt.Fprintln(&b, "mask.nii.gz: where the pattern changed the anatomy (0 unchanged, 1 ventricles, 2 cortex, 3 medial temporal).")
	return b.Bytes()
}
