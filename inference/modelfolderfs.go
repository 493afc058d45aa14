package inference

import (
	"fmt"
	"io/fs"
	"os"
	"strconv"
	"syscall"
	"time"
)

// DefaultModelByteLimit is the largest model.onnx read on the default
// settings: 256 MiB (a 3D ResNet-18 of about 33 M float32 parameters is
// 133 MB). The bytes are held about three times (file, decoded graph, ONNX
// Runtime's copy), which keeps loading within 1 GiB.
const DefaultModelByteLimit = 256 << 20

// ModelByteLimitEnv raises the model size limit for a legitimate larger
// model, e.g. BRIGHTFOLD_MAX_MODEL_BYTES=600000000 (at most MaxModelBytes).
const ModelByteLimitEnv = "BRIGHTFOLD_MAX_MODEL_BYTES"

// ModelByteLimit is the largest model.onnx a model folder may hold:
// ModelByteLimitEnv when set to a positive integer, else DefaultModelByteLimit.
func ModelByteLimit() int64 {
	if s := os.Getenv(ModelByteLimitEnv); s != "" {
		if n, err := strconv.ParseInt(s, 10, 64); err == nil && n > 0 {
			return min(n, MaxModelBytes)
		}
	}
	return DefaultModelByteLimit
}

// rootFS is a model folder on disk read through an os.Root: a symbolic link
// that leads out of the folder is refused (nothing outside is opened), and
// only regular files and folders are opened, without blocking, so a named
// pipe or device named model.onnx cannot hang or flood the reader.
type rootFS struct{ root *os.Root }

// Open opens name inside the folder.
func (r rootFS) Open(name string) (fs.File, error) {
	if !fs.ValidPath(name) {
		return nil, &fs.PathError{Op: "open", Path: name, Err: fs.ErrInvalid}
	}
	st, err := r.root.Stat(name)
	if err != nil {
		return nil, err
	}
	if !st.Mode().IsRegular() && !st.IsDir() {
		return nil, &fs.PathError{Op: "open", Path: name, Err: fmt.Errorf("is not a regular file (mode %v); only regular files are read", st.Mode().Type())}
	}
	f, err := r.root.OpenFile(name, os.O_RDONLY|syscall.O_NONBLOCK, 0)
	if err != nil {
		return nil, err
	}
	if st2, err := f.Stat(); err != nil || !os.SameFile(st, st2) {
		f.Close()
		return nil, &fs.PathError{Op: "open", Path: name, Err: fmt.Errorf("changed while being opened")}
	}
	return f, nil
}

// Stat describes name inside the folder without opening it.
func (r rootFS) Stat(name string) (fs.FileInfo, error) {
	if !fs.ValidPath(name) {
		return nil, &fs.PathError{Op: "stat", Path: name, Err: fs.ErrInvalid}
	}
	return r.root.Stat(name)
}

// modelRunBudget is how long one model run may take before it is stopped
// (see SessionOptions.RunBudget).
const modelRunBudget = 120 * time.Second

// RunBudgetEnv sets the per-run time budget in seconds, for a legitimate
// slow model (e.g. BRIGHTFOLD_RUN_SECONDS=600).
const RunBudgetEnv = "BRIGHTFOLD_RUN_SECONDS"

// RunBudget is the time one model run may take: RunBudgetEnv when set to a
// positive number of seconds, else two minutes.
func RunBudget() time.Duration {
	if s := os.Getenv(RunBudgetEnv); s != "" {
		if x, err := strconv.ParseFloat(s, 64); err == nil && x > 0 {
			return time.Duration(x * float64(time.Second))
		}
	}
	return modelRunBudget
}
