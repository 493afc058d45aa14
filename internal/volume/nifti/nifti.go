package nifti

import (
	"bufio"
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"brightfold/internal/inputerr"
	"brightfold/internal/volume"
)

// maxDeflateRatio bounds how much one byte of deflate data can expand
// (RFC 1951 allows at most about 1032:1); a header asking for more data than
// a gzip file of its size can hold is refused before anything is allocated.
const maxDeflateRatio = 1032

// loadNIfTI reads one 3D frame of a NIfTI-1, NIfTI-2 or Analyze 7.5 image:
// a .nii or .nii.gz file, or a .hdr/.img pair, each part gzipped or not.
func loadNIfTI(path string, opts volume.LoadOptions) (*volume.Volume, error) {
	return readNIfTI(path, opts, maxInMemoryGzip)
}

// readNIfTI is loadNIfTI with the size up to which gzip files are inflated
// from memory rather than streamed.
func readNIfTI(path string, opts volume.LoadOptions, inMemoryGzip int64) (*volume.Volume, error) {
	hdrPath, err := niftiHeaderPath(path)
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	prefix, err := readNIfTIHeaderPrefix(hdrPath)
	if err != nil {
		return nil, inputerr.Wrap(hdrPath, err)
	}
	h, warn, err := parseNIfTIHeader(prefix, isHeaderName(hdrPath))
	if err != nil {
		return nil, inputerr.Wrap(hdrPath, err)
	}
	a, w, err := h.affine()
	if err != nil {
		return nil, inputerr.Wrap(hdrPath, err)
	}
	warn = append(warn, w...)
	imgPath := hdrPath
	if !h.single {
		if imgPath, err = niftiImagePath(hdrPath); err != nil {
			return nil, inputerr.Wrap(hdrPath, err)
		}
	}
	if opts.VolumeIndex < 0 || opts.VolumeIndex >= h.frames() {
		return nil, inputerr.New(path, "volume index %d is out of range: the image has %d volume(s)", opts.VolumeIndex, h.frames())
	}
	data, err := readNIfTIFrame(imgPath, h, opts.VolumeIndex, inMemoryGzip)
	if err != nil {
		return nil, inputerr.Wrap(imgPath, err)
	}
	v := &volume.Volume{Data: data, Dims: h.spatial(), Affine: a, Source: path}
	v.Meta = volume.Metadata{
		Format:      "nifti",
		DataType:    dataTypeName(h.datatype),
		Description: h.descrip,
		NumVolumes:  h.frames(),
		VolumeIndex: opts.VolumeIndex,
	}
	if n := h.frames(); n > 1 {
		warn = append(warn, fmt.Sprintf("%dD input with %d volumes: using volume %d only", h.ndim, n, opts.VolumeIndex))
	}
	switch h.xyztUnits & 7 {
	case 1, 3:
		warn = append(warn, "xyzt_units gives metres or micrometres; the affine is used as millimetres, as nibabel does")
	}
	if h.kind == kindAnalyze {
		if stem, _, _ := splitPairName(hdrPath); isRegularFile(stem + ".mat") {
			warn = append(warn, "an SPM .mat file lies beside this Analyze header; it is not read, the header's geometry is used")
		}
	}
	v.Warnings = warn
	return v, nil
}

func isHeaderName(p string) bool {
	n := strings.ToLower(p)
	return strings.HasSuffix(n, ".hdr") || strings.HasSuffix(n, ".hdr.gz")
}

// splitPairName returns the stem, whether the name ends in .gz, and the
// case of the extension (for .HDR/.IMG pairs).
func splitPairName(p string) (stem string, gz, upper bool) {
	if strings.HasSuffix(strings.ToLower(p), ".gz") {
		p, gz = p[:len(p)-3], true
	}
	ext := filepath.Ext(p)
	return strings.TrimSuffix(p, ext), gz, ext != "" && ext == strings.ToUpper(ext)
}

// pairCandidates lists the sibling names to try, the same compression first.
func pairCandidates(p, ext string) []string {
	stem, gz, upper := splitPairName(p)
	if upper {
		ext = strings.ToUpper(ext)
	}
	gzExt := ".gz"
	if upper {
		gzExt = ".GZ"
	}
	if gz {
		return []string{stem + ext + gzExt, stem + ext}
	}
	return []string{stem + ext, stem + ext + gzExt}
}

func isRegularFile(p string) bool {
	st, err := os.Stat(p)
	return err == nil && st.Mode().IsRegular()
}

func firstExisting(names []string) (string, error) {
	for _, n := range names {
		if isRegularFile(n) {
			return n, nil
		}
	}
	return "", fmt.Errorf("missing file: looked for %s", strings.Join(names, " and "))
}

// niftiHeaderPath is the file holding the header: path itself, or for an .img
// the .hdr beside it.
func niftiHeaderPath(path string) (string, error) {
	n := strings.ToLower(path)
	if strings.HasSuffix(n, ".img") || strings.HasSuffix(n, ".img.gz") {
		h, err := firstExisting(pairCandidates(path, ".hdr"))
		if err != nil {
			return "", fmt.Errorf("no header for this image: %w", err)
		}
		return h, nil
	}
	return path, nil
}

// niftiImagePath is the .img beside a pair header.
func niftiImagePath(hdr string) (string, error) {
	if !isHeaderName(hdr) {
		return "", errors.New("the header's magic says the image data is in a separate .img file, but this is not a .hdr file")
	}
	p, err := firstExisting(pairCandidates(hdr, ".img"))
	if err != nil {
		return "", fmt.Errorf("image data of this header: %w", err)
	}
	return p, nil
}

// openMaybeGzip opens path and, when it starts with the gzip magic bytes,
// returns a decompressing reader. size is the file's size on disk.
func openMaybeGzip(path string, inMemory int64) (r io.Reader, gz gunzip, f *os.File, size int64, err error) {
	f, err = volume.OpenRegular(path)
	if err != nil {
		return nil, nil, nil, 0, err
	}
	st, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, nil, nil, 0, err
	}
	br := bufio.NewReaderSize(f, 1<<16)
	magic, _ := br.Peek(2)
	if len(magic) == 2 && magic[0] == 0x1f && magic[1] == 0x8b {
		var src io.Reader = br
		if st.Size() <= inMemory {
			// Inflating from memory is markedly faster than through bufio.
			b := make([]byte, st.Size())
			if _, err := io.ReadFull(br, b); err != nil {
				f.Close()
				return nil, nil, nil, 0, err
			}
			src = bytes.NewReader(b)
		}
		gz, err = newGunzip(src, st.Size())
		if err != nil {
			f.Close()
			return nil, nil, nil, 0, fmt.Errorf("corrupt gzip data: %w", err)
		}
		return gz, gz, f, st.Size(), nil
	}
	return br, nil, f, st.Size(), nil
}

// maxInMemoryGzip is the largest gzip file read into memory before
// inflating; larger ones (long 4D series) are streamed.
const maxInMemoryGzip = 256 << 20

// gunzip is a gzip stream reader.
type gunzip interface {
	io.Reader
	Close() error
}

// newGunzip decompresses large files on a second core (pgzip reads ahead
// while the caller converts voxels) and small ones without its buffers.
func newGunzip(r io.Reader, size int64) (gunzip, error) {
	return newGzipMembers(r, size)
}

// readNIfTIHeaderPrefix returns the first bytes of the (decompressed) file, enough
// for any header kind.
func readNIfTIHeaderPrefix(path string) ([]byte, error) {
	r, gz, f, _, err := openMaybeGzip(path, 0)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	if gz != nil {
		defer gz.Close()
	}
	return readNIfTIPrefix(r, gz != nil)
}

func readNIfTIPrefix(r io.Reader, gz bool) ([]byte, error) {
	buf := make([]byte, niftiPrefixLen)
	n, err := io.ReadFull(r, buf)
	if err != nil && err != io.ErrUnexpectedEOF && err != io.EOF {
		if gz {
			return nil, fmt.Errorf("corrupt gzip data: %w", err)
		}
		return nil, err
	}
	return buf[:n], nil
}

// readNIfTIFrame reads frame index of the image data in imgPath.
func readNIfTIFrame(imgPath string, h *niftiHeader, index int, inMemoryGzip int64) ([]float32, error) {
	r, gz, f, size, err := openMaybeGzip(imgPath, inMemoryGzip)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	if gz != nil {
		defer gz.Close()
	}
	sp := h.spatial()
	nvox := sp[0] * sp[1] * sp[2]
	frameBytes := int64(nvox) * int64(h.bytesPerVoxel())
	need := h.voxOffset + int64(h.frames())*frameBytes
	fr := &frameReader{h: h, nvox: nvox, frameBytes: frameBytes, need: need, gz: gz != nil}
	if gz == nil {
		if need > size {
			return nil, fmt.Errorf("file is %d bytes but the header needs %d (vox_offset %d + %d volume(s) of %d×%d bytes): truncated, or vox_offset or dims wrong",
				size, need, h.voxOffset, h.frames(), nvox, h.bytesPerVoxel())
		}
		if err := volume.CheckVoxels(sp[:]); err != nil {
			return nil, err
		}
		if _, err := f.Seek(h.voxOffset+int64(index)*frameBytes, io.SeekStart); err != nil {
			return nil, err
		}
		return fr.read(bufio.NewReaderSize(f, 1<<20), true, index, false)
	}
	if need > maxDeflateRatio*size+1<<16 {
		return nil, fmt.Errorf("header needs %d bytes of image data, more than a %d-byte gzip file can hold: dims or vox_offset wrong", need, size)
	}
	if err := volume.CheckVoxels(sp[:]); err != nil {
		return nil, err
	}
	prealloc := gzipSizeMatches(f, size, need)
	if _, err := io.CopyN(io.Discard, r, h.voxOffset+int64(index)*frameBytes); err != nil {
		return nil, fr.short(err, "before the image data (vox_offset %d)", h.voxOffset)
	}
	return fr.read(r, prealloc, index, true)
}

// gzipSizeMatches reads the gzip trailer's ISIZE (the uncompressed length
// modulo 2³², RFC 1952) and reports whether it agrees with the length the
// header implies. Only then is the whole frame allocated up front; otherwise
// the buffer grows with the data actually decompressed.
func gzipSizeMatches(f *os.File, size, need int64) bool {
	if size < 18 {
		return false
	}
	var t [4]byte
	if _, err := f.ReadAt(t[:], size-4); err != nil {
		return false
	}
	return int64(binary.LittleEndian.Uint32(t[:])) == need&0xffffffff
}

// frameReader decodes one frame from a stream positioned at its start.
type frameReader struct {
	h          *niftiHeader
	nvox       int
	frameBytes int64
	need       int64
	gz         bool
}

func (fr *frameReader) short(err error, format string, args ...any) error {
	if errors.Is(err, io.EOF) || errors.Is(err, io.ErrUnexpectedEOF) {
		return fmt.Errorf("image data ends early "+format+": truncated file, or vox_offset or dims wrong", args...)
	}
	if fr.gz {
		return fmt.Errorf("corrupt gzip data: %w", err)
	}
	return fmt.Errorf("reading image data: %w", err)
}

// read decodes nvox voxels. With prealloc the output is allocated at once;
// else it grows chunk by chunk so a lying header cannot make it allocate.
// With drain (gzip), the rest of the stream is read so that missing later
// frames and a bad CRC are noticed.
func (fr *frameReader) read(r io.Reader, prealloc bool, index int, drain bool) ([]float32, error) {
	bpv := fr.h.bytesPerVoxel()
	const chunkVox = 1 << 20
	var out []float32
	if prealloc {
		out = make([]float32, fr.nvox)
	} else {
		out = make([]float32, 0, min(fr.nvox, chunkVox))
	}
	raw := make([]byte, min(fr.nvox, chunkVox)*bpv)
	dec := newVoxelDecoder(fr.h)
	for done := 0; done < fr.nvox; {
		n := min(fr.nvox-done, chunkVox)
		if _, err := io.ReadFull(r, raw[:n*bpv]); err != nil {
			return nil, fr.short(err, "in volume %d", index)
		}
		if !prealloc {
			out = append(out, make([]float32, n)...)
		}
		dec.decode(out[done:done+n], raw[:n*bpv])
		done += n
	}
	if drain {
		rest := int64(fr.h.frames()-index-1) * fr.frameBytes
		if _, err := io.CopyN(io.Discard, r, rest); err != nil {
			return nil, fr.short(err, "after volume %d (the header has %d)", index, fr.h.frames())
		}
		// Reading on to the end checks the gzip CRC however much follows the
		// image (no cap: the time is bounded by the file's size times
		// deflate's largest ratio, the memory by io.Discard's buffer); zero
		// padding after the last member is allowed, other trailing bytes
		// are refused.
		if _, err := io.Copy(io.Discard, r); err != nil {
			return nil, fmt.Errorf("corrupt gzip data after the image: %w", err)
		}
	}
	return out, nil
}
