package dicom

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"brightfold/internal/inputerr"
	"brightfold/internal/parallel"
	"brightfold/internal/volume"
)

// maxDICOMFileSize bounds one file: DICOM element lengths are 32-bit.
const maxDICOMFileSize = 4 << 30

// dcmScan is the header pass over DICOM input.
type dcmScan struct {
	where    string // the input named in errors: the only path, or the first
	files    []*dcmFile
	failed   []fileProblem // DICOM files whose header could not be read
	notImage []*dcmFile    // DICOM files without pixel data
	notDICOM []string      // files found in folders that are not DICOM
	series   []*dcmSeries
}

type fileProblem struct {
	path string
	err  error
}

// ListSeries reads the headers of DICOM files and folders (searched
// recursively) and lists the image series they hold, including series that
// cannot be loaded (with their Problem). Non-DICOM files in folders are
// ignored; it is an input error when there is no image series at all.
func ListSeries(paths []string) ([]SeriesInfo, error) {
	sc, err := scanDICOM(paths)
	if err != nil {
		return nil, err
	}
	out := make([]SeriesInfo, len(sc.series))
	for i, s := range sc.series {
		out[i] = s.info
	}
	return out, nil
}

// loadDICOM reads one DICOM series from files and folders.
func loadDICOM(paths []string, opts volume.LoadOptions) (*volume.Volume, error) {
	sc, err := scanDICOM(paths)
	if err != nil {
		return nil, err
	}
	s, err := sc.choose(opts.SeriesUID)
	if err != nil {
		return nil, err
	}
	if len(s.broken) > 0 {
		return nil, inputProblem(s.broken[0])
	}
	g, err := s.volumeGeometry(opts.VolumeIndex)
	if err != nil {
		return nil, inputerr.New(sc.where, "series %s: %v", s.info.Key, err)
	}
	v, err := assembleVolume(s, g)
	if err != nil {
		return nil, err
	}
	if g.volumes > 1 {
		v.Meta.NumVolumes = g.volumes
		v.Warnings = append(v.Warnings, fmt.Sprintf("series %s holds %d volumes (every slice position repeats %d times); loaded volume %d, as for a 4D NIfTI",
			s.info.Key, g.volumes, g.volumes, opts.VolumeIndex))
	}
	v.Source = sc.where
	v.Warnings = append(v.Warnings, sc.warnings(s)...)
	return v, nil
}

// inputProblem is the error of an unusable file, naming it.
func inputProblem(f *dcmFile) error { return inputerr.Wrap(f.path, f.err) }

// scanDICOM finds the files and reads their headers.
func scanDICOM(paths []string) (*dcmScan, error) {
	if len(paths) == 0 {
		return nil, inputerr.New("", "no DICOM input given")
	}
	sc := &dcmScan{where: paths[0]}
	explicit, found, err := dcmCollectFiles(paths)
	if err != nil {
		return nil, err
	}
	results := readHeaders(append(explicit, found...))
	isExplicit := map[string]bool{}
	for _, p := range explicit {
		isExplicit[p] = true
	}
	for _, r := range results {
		switch {
		case r.err == nil && errors.Is(r.file.err, errNoPixelData):
			sc.notImage = append(sc.notImage, r.file)
		case r.err == nil:
			sc.files = append(sc.files, r.file)
		case errors.Is(r.err, errNotDICOM) && !isExplicit[r.path]:
			sc.notDICOM = append(sc.notDICOM, r.path)
		default:
			sc.failed = append(sc.failed, fileProblem{r.path, r.err})
		}
	}
	for _, p := range sc.failed {
		if isExplicit[p.path] {
			return nil, inputerr.Wrap(p.path, p.err)
		}
	}
	sc.series = groupSeries(sc.files)
	if len(sc.series) == 0 {
		return nil, sc.nothingFound(len(explicit) + len(found))
	}
	return sc, nil
}

// dcmCollectFiles expands folders recursively (sorted, hidden files skipped).
func dcmCollectFiles(paths []string) (explicit, found []string, err error) {
	for _, p := range paths {
		info, err := os.Stat(p)
		if err != nil {
			return nil, nil, inputerr.Wrap(p, err)
		}
		if !info.IsDir() {
			explicit = append(explicit, p)
			continue
		}
		root, err := filepath.EvalSymlinks(p)
		if err != nil {
			return nil, nil, inputerr.Wrap(p, err)
		}
		err = filepath.WalkDir(p, func(q string, d fs.DirEntry, err error) error {
			if err != nil {
				return err
			}
			if q != p && strings.HasPrefix(d.Name(), ".") {
				if d.IsDir() {
					return filepath.SkipDir
				}
				return nil
			}
			if d.Type().IsRegular() || (d.Type()&fs.ModeSymlink != 0 && linkInside(root, q)) {
				found = append(found, q)
			}
			return nil
		})
		if err != nil {
			return nil, nil, inputerr.Wrap(p, fmt.Errorf("read folder: %w", err))
		}
	}
	sort.Strings(found)
	return explicit, found, nil
}

type headerResult struct {
	path string
	file *dcmFile
	err  error
}

// readHeaders reads the headers of files on all cores, keeping their order.
func readHeaders(paths []string) []headerResult {
	out := make([]headerResult, len(paths))
	parallel.Each(len(paths), 0, func(_, i int) {
		out[i] = headerResult{path: paths[i]}
		out[i].file, out[i].err = readHeaderFile(paths[i])
	})
	return out
}

func readHeaderFile(path string) (f *dcmFile, err error) {
	defer dcmRecoverAsError(&err)
	head, size, err := readFileHead(path, dcmHeaderPrefix)
	if err != nil {
		return nil, err
	}
	if int64(len(head)) < size {
		f, err := readDICOMHeaderPrefix(path, head, size)
		if !errors.Is(err, errNeedWhole) {
			return f, err
		}
	}
	data, err := dcmReadBounded(path)
	if err != nil {
		return nil, err
	}
	return readDICOMHeader(path, data)
}

// dcmHeaderPrefix is how much of a file the header pass reads first; the
// headers of single-frame images fit, and pixel data is not read.
const dcmHeaderPrefix = 16 << 10

// readFileHead reads up to n bytes from the start of a file and returns them
// with the file's size.
func readFileHead(path string, n int) ([]byte, int64, error) {
	fh, err := volume.OpenRegular(path)
	if err != nil {
		return nil, 0, err
	}
	defer fh.Close()
	info, err := fh.Stat()
	if err != nil {
		return nil, 0, err
	}
	if int64(n) > info.Size() {
		n = int(info.Size())
	}
	buf := make([]byte, n)
	if _, err := io.ReadFull(fh, buf); err != nil {
		return nil, 0, err
	}
	return buf, info.Size(), nil
}

// dcmRecoverAsError turns a panic while reading one file into that file's
// error, so that a reader bug on a hostile file cannot crash the program.
func dcmRecoverAsError(err *error) {
	if r := recover(); r != nil {
		*err = fmt.Errorf("internal error while reading this file: %v", r)
	}
}

// dcmReadBounded reads a whole file, refusing one above maxDICOMFileSize.
func dcmReadBounded(path string) ([]byte, error) {
	info, err := os.Stat(path)
	if err != nil {
		return nil, err
	}
	if info.Size() > maxDICOMFileSize {
		return nil, fmt.Errorf("file of %d bytes is larger than a DICOM file can be", info.Size())
	}
	// A file read whole holds at most the voxel limit's pixels at 32 bits
	// plus its header; a larger one is refused before it is read.
	limit := 4*int64(volume.VoxelLimit()) + 16<<20
	if info.Size() > limit {
		return nil, fmt.Errorf("file of %d bytes is larger than the limit of %d MiB for one DICOM file (4 bytes per voxel of the voxel limit); set %s to raise it",
			info.Size(), limit>>20, volume.VoxelLimitEnv)
	}
	return volume.ReadRegular(path, limit)
}

// nothingFound explains why the input holds no image series.
func (sc *dcmScan) nothingFound(total int) error {
	switch {
	case len(sc.failed) > 0:
		p := sc.failed[0]
		if len(sc.failed) == 1 && total == 1 {
			return inputerr.Wrap(p.path, p.err)
		}
		return inputerr.New(sc.where, "no readable DICOM image series: %d unreadable DICOM file(s), first %s: %v",
			len(sc.failed), p.path, p.err)
	case len(sc.notImage) > 0:
		f := sc.notImage[0]
		if total == 1 {
			return inputerr.Wrap(f.path, f.err)
		}
		return inputerr.New(sc.where, "no DICOM images: %d DICOM file(s) without pixel data (7FE0,0010), first %s",
			len(sc.notImage), f.path)
	case len(sc.notDICOM) > 0:
		return inputerr.New(sc.where, "no DICOM files among %d file(s) (none has \"DICM\" at byte 128, DICOM PS3.10 7.1)",
			len(sc.notDICOM))
	}
	return inputerr.New(sc.where, "no files found")
}

// choose picks the series named by key (a Key or a SeriesInstanceUID), or
// the only one.
func (sc *dcmScan) choose(key string) (*dcmSeries, error) {
	if key == "" {
		if len(sc.series) == 1 {
			return sc.series[0], nil
		}
		return nil, inputerr.New(sc.where, "%d series found, choose one by its key: %s", len(sc.series), describeSeries(sc.series))
	}
	var byUID []*dcmSeries
	for _, s := range sc.series {
		if s.info.Key == key {
			return s, nil
		}
		if s.info.UID == key {
			byUID = append(byUID, s)
		}
	}
	switch len(byUID) {
	case 1:
		return byUID[0], nil
	case 0:
		return nil, inputerr.New(sc.where, "no series %q; found: %s", key, describeSeries(sc.series))
	}
	return nil, inputerr.New(sc.where, "series %s was split (mixed orientation, matrix, spacing or echo time); choose one: %s",
		key, describeSeries(byUID))
}

// warnings lists what the scan skipped, for the volume's warnings.
func (sc *dcmScan) warnings(chosen *dcmSeries) []string {
	var w []string
	if n := len(sc.failed); n > 0 {
		w = append(w, fmt.Sprintf("%d unreadable DICOM file(s) skipped, first %s: %v", n, sc.failed[0].path, sc.failed[0].err))
	}
	if n := len(sc.series); n > 1 {
		w = append(w, fmt.Sprintf("input holds %d series; loaded %s", n, chosen.info.Key))
	}
	return w
}

// assembleVolume reads the pixels of the sorted frames into a volume.
func assembleVolume(s *dcmSeries, g seriesGeometry) (*volume.Volume, error) {
	ref := g.order[0]
	dims := [3]int{ref.file.cols, ref.file.rows, len(g.order)}
	v, err := volume.New(dims, g.affine)
	if err != nil {
		return nil, inputerr.New(ref.file.path, "series %s: %v", s.info.Key, err)
	}
	// Frames of one file are decoded together, so that each file is read once.
	slot := map[*dcmFile][]int{}
	var files []*dcmFile
	for k, fr := range g.order {
		if _, ok := slot[fr.file]; !ok {
			files = append(files, fr.file)
		}
		slot[fr.file] = append(slot[fr.file], k)
	}
	n := dims[0] * dims[1]
	errs := make([]error, len(files))
	padded := make([]int64, len(files))
	parallel.Each(len(files), 0, func(_, i int) {
		padded[i], errs[i] = dcmDecodeSlices(files[i], slot[files[i]], g.order, v.Data, n)
	})
	for i, err := range errs {
		if err != nil {
			return nil, inputerr.Wrap(files[i].path, err)
		}
	}
	v.Meta = seriesMeta(ref)
	v.Patient = ref.file.patient
	v.Warnings = append(v.Warnings, g.warnings...)
	v.Warnings = append(v.Warnings, pixelWarnings(files, padded)...)
	return v, nil
}

// dcmDecodeSlices reads one file's pixels into the slices it holds (slots k of
// order, n voxels each) and returns the excess padding it carried.
func dcmDecodeSlices(f *dcmFile, slots []int, order []dcmFrame, data []float32, n int) (padded int64, err error) {
	defer dcmRecoverAsError(&err)
	raw, err := dcmReadBounded(f.path)
	if err != nil {
		return 0, err
	}
	if raw, err = readPixelBytes(f, raw); err != nil {
		return 0, err
	}
	for _, k := range slots {
		f.decodeFrame(raw, order[k], data[k*n:(k+1)*n])
	}
	return f.excessPadding(len(raw)), nil
}

// seriesMeta is the metadata of the first slice, with the stored type.
func seriesMeta(ref dcmFrame) volume.Metadata {
	f := ref.file
	m := f.meta
	m.DataType = storedTypeName(f.bitsAllocated, f.signed)
	if ref.thickness > 0 {
		m.SliceThicknessMm = ref.thickness
	}
	return m
}

func storedTypeName(bits int, signed bool) string {
	if bits == 1 {
		return "bit"
	}
	if signed {
		return fmt.Sprintf("int%d", bits)
	}
	return fmt.Sprintf("uint%d", bits)
}

// pixelWarnings reports grey-scale inversion and excess padding.
func pixelWarnings(files []*dcmFile, padded []int64) []string {
	var w []string
	mono1, pad := 0, 0
	for i, f := range files {
		if f.photometric == "MONOCHROME1" {
			mono1++
		}
		if padded[i] > 0 {
			pad++
		}
	}
	if mono1 > 0 {
		w = append(w, "PhotometricInterpretation MONOCHROME1: the scan is meant to be shown inverted (low values white); "+
			"values are kept as stored")
	}
	if pad > 0 {
		w = append(w, fmt.Sprintf("%d file(s) carry pixel data longer than the image; the excess was ignored", pad))
	}
	return w
}

// linkInside reports whether the symbolic link q leads to a regular file
// inside the folder root (resolved): a folder of linked DICOM files is read,
// a link that leaves the folder or names a pipe or device is skipped.
func linkInside(root, q string) bool {
	t, err := filepath.EvalSymlinks(q)
	if err != nil {
		return false
	}
	rel, err := filepath.Rel(root, t)
	if err != nil || rel == ".." || strings.HasPrefix(rel, ".."+string(filepath.Separator)) {
		return false
	}
	st, err := os.Stat(t)
	return err == nil && st.Mode().IsRegular()
}
