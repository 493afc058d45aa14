package exec

import (
	"fmt"
	"os"
	"strconv"

	"brightfold/internal/onnx"
)

// MemoryLimitEnv sets, in MiB, the memory a model may take while it runs:
// here the values of one forward pass (and, separately, the gradients of
// one backward pass), and in package inference ONNX Runtime's arena. Raise
// it for a legitimate large model, e.g. BRIGHTFOLD_MODEL_MEMORY_MB=2048.
const MemoryLimitEnv = "BRIGHTFOLD_MODEL_MEMORY_MB"

// DefaultMemoryLimit is the limit on the default settings: 256 MiB, which
// with ONNX Runtime's arena of the same size, the Go heap's other contents
// and the libraries keeps a process under 1 GiB.
const DefaultMemoryLimit = 256 << 20

// MemoryLimit is MemoryLimitEnv MiB when set to a positive integer, else
// DefaultMemoryLimit.
func MemoryLimit() int64 {
	if s := os.Getenv(MemoryLimitEnv); s != "" {
		if n, err := strconv.ParseInt(s, 10, 64); err == nil && n > 0 && n < 1<<40 {
			return n << 20
		}
	}
	return DefaultMemoryLimit
}

// MemoryError is a run that would pass the memory limit: one tensor whose
// size comes from run-time shapes (a broadcast, a product, a padded
// window), or all the values of a pass together. It is returned before the
// memory is allocated.
type MemoryError struct {
	What  string // what needed the memory
	Bytes int64  // bytes it needed (at least)
	Limit int64  // the limit in bytes
}

func (e *MemoryError) Error() string {
	return fmt.Sprintf("%s would take at least %d MiB, more than the model memory limit of %d MiB; set %s to a larger number of MiB if the model is legitimate",
		e.What, e.Bytes>>20, e.Limit>>20, MemoryLimitEnv)
}

// checkAlloc refuses a tensor of shape with bytesPerElem bytes per element
// (its elements and any index tables of the same length) when it would pass
// MemoryLimit or overflow.
func checkAlloc(shape []int, bytesPerElem int64) error {
	limit := MemoryLimit()
	n, err := onnx.CheckedNumel(shape)
	if err != nil {
		return &MemoryError{What: fmt.Sprintf("a tensor of shape %v", shape), Bytes: onnx.MaxElements * bytesPerElem, Limit: limit}
	}
	if b := int64(n) * bytesPerElem; b > limit {
		return &MemoryError{What: fmt.Sprintf("a tensor of shape %v", shape), Bytes: b, Limit: limit}
	}
	return nil
}

// tensorBytes is the memory of t's elements.
func tensorBytes(t *onnx.Tensor) int64 {
	if t == nil {
		return 0
	}
	return int64(len(t.Data))*4 + int64(len(t.Ints))*8
}

// passBudget counts the bytes one forward or backward pass has made, each
// array once (a reshaped value shares its input's elements).
type passBudget struct {
	what        string
	used, limit int64
	seen        map[any]bool
}

func newPassBudget(what string) *passBudget {
	return &passBudget{what: what, limit: MemoryLimit(), seen: map[any]bool{}}
}

// add counts ts and refuses the pass when it passes the limit.
func (p *passBudget) add(ts ...*onnx.Tensor) error {
	for _, t := range ts {
		var key any
		switch {
		case t == nil:
			continue
		case len(t.Data) > 0:
			key = &t.Data[0]
		case len(t.Ints) > 0:
			key = &t.Ints[0]
		default:
			continue
		}
		if !p.seen[key] {
			p.seen[key] = true
			p.used += tensorBytes(t)
		}
	}
	if p.used > p.limit {
		return &MemoryError{What: p.what, Bytes: p.used, Limit: p.limit}
	}
	return nil
}
