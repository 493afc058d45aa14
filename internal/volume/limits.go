package volume

import (
	"fmt"
	"io"
	"io/fs"
	"os"
	"strconv"
	"syscall"
)

// DefaultVoxelLimit is how many voxels one volume may hold on the default
// settings: 32 Mi voxels (128 MiB as float32, e.g. 512×512×128 or
// 320×320×320), so that loading, preparing, scoring and mapping a scan
// stays within 1 GiB (a 512×512×128 scan at the limit peaked at 0.73 GiB
// with --map lrp, ig or occlusion; one at 64 Mi voxels reached 0.98 GiB).
const DefaultVoxelLimit = 32 << 20

// VoxelLimitEnv names the environment variable that raises (or lowers) the
// voxel limit for legitimate larger scans, e.g. BRIGHTFOLD_MAX_VOXELS=200000000.
const VoxelLimitEnv = "BRIGHTFOLD_MAX_VOXELS"

// VoxelLimit is the number of voxels one volume may hold: VoxelLimitEnv when
// it is set to a positive integer (at most MaxVoxels), else DefaultVoxelLimit.
func VoxelLimit() int {
	if s := os.Getenv(VoxelLimitEnv); s != "" {
		if n, err := strconv.ParseInt(s, 10, 64); err == nil && n > 0 {
			return int(min(n, MaxVoxels))
		}
	}
	return DefaultVoxelLimit
}

// CheckVoxels refuses dims whose product exceeds VoxelLimit, before anything
// is allocated, naming the limit and how to raise it.
func CheckVoxels(dims []int) error {
	limit := VoxelLimit()
	if _, err := CheckedProduct(dims, MaxVoxels); err != nil {
		return err
	}
	n, _ := CheckedProduct(dims, MaxVoxels)
	if n > limit {
		return fmt.Errorf("%v is %d voxels, more than the limit of %d (%d MiB as float32); set %s to raise it for a legitimate scan",
			dims, n, limit, limit>>18, VoxelLimitEnv)
	}
	return nil
}

// CheckRegular refuses a path that is neither a regular file nor (with
// dirOK) a folder: a named pipe, a device or a socket could block a reader
// forever or never end. Symbolic links are followed.
func CheckRegular(path string, dirOK bool) error {
	st, err := os.Stat(path)
	if err != nil {
		return err
	}
	return regularMode(st.Mode(), dirOK)
}

func regularMode(m fs.FileMode, dirOK bool) error {
	switch {
	case m.IsRegular(), dirOK && m.IsDir():
		return nil
	case m.IsDir():
		return fmt.Errorf("is a folder, not a file")
	case m&fs.ModeNamedPipe != 0:
		return fmt.Errorf("is a named pipe (FIFO), not a regular file; only regular files are read")
	case m&fs.ModeSocket != 0:
		return fmt.Errorf("is a socket, not a regular file; only regular files are read")
	case m&fs.ModeDevice != 0:
		return fmt.Errorf("is a device, not a regular file; only regular files are read")
	}
	return fmt.Errorf("is not a regular file (mode %v); only regular files are read", m)
}

// OpenRegular opens path for reading only if it is a regular file. It opens
// without blocking (so a named pipe swapped in after a check cannot hang the
// reader) and checks the opened file itself.
func OpenRegular(path string) (*os.File, error) {
	if err := CheckRegular(path, false); err != nil {
		return nil, err
	}
	f, err := os.OpenFile(path, os.O_RDONLY|syscall.O_NONBLOCK, 0)
	if err != nil {
		return nil, err
	}
	st, err := f.Stat()
	if err == nil {
		err = regularMode(st.Mode(), false)
	}
	if err != nil {
		f.Close()
		return nil, err
	}
	return f, nil
}

// ReadRegular reads a whole regular file, refusing one larger than limit
// bytes before reading it.
func ReadRegular(path string, limit int64) ([]byte, error) {
	f, err := OpenRegular(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return nil, err
	}
	if st.Size() > limit {
		return nil, fmt.Errorf("file of %d bytes is larger than the limit of %d bytes", st.Size(), limit)
	}
	b := make([]byte, st.Size())
	if _, err := io.ReadFull(f, b); err != nil {
		return nil, err
	}
	return b, nil
}
