package inference

import (
	"context"
	"errors"
	"fmt"
	"os"
	"strconv"
	"strings"
	"time"

	"brightfold/internal/inputerr"
	"brightfold/internal/onnx/exec"
	ort "github.com/yalue/onnxruntime_go"
)

// DefaultModelMemory is the memory ONNX Runtime may take for one process's
// model runs on the default settings (256 MiB): tensors, their intermediate
// values and the model's initializers, in all sessions together. With the
// Go heap's soft limit of 700 MiB (cmd/brightfold/memlimit.go) and the
// library itself the process stays under 1 GiB. The Go executor of
// relevance maps has the same limit (exec.MemoryLimit).
const DefaultModelMemory = exec.DefaultMemoryLimit

// ModelMemoryEnv raises (or lowers) the model memory limit in MiB for a
// legitimate larger model, e.g. BRIGHTFOLD_MODEL_MEMORY_MB=2048.
const ModelMemoryEnv = exec.MemoryLimitEnv

// ModelMemoryLimit is the byte budget of ONNX Runtime's CPU allocator:
// ModelMemoryEnv MiB when set to a positive integer, else DefaultModelMemory.
func ModelMemoryLimit() int64 { return exec.MemoryLimit() }

// useEnvAllocators is ONNX Runtime's session configuration key that makes a
// session allocate through the environment's registered allocators
// (onnxruntime_session_options_config_keys.h).
const useEnvAllocators = "session.use_env_allocators"

// registerBoundedAllocator registers the environment's CPU allocator: a BFC
// arena that grows by exactly what is asked (arena_extend_strategy 1,
// kSameAsRequested) and refuses to grow past limit bytes, so that a model
// asking for more memory than the limit fails its run with an error status
// instead of growing the process.
func registerBoundedAllocator(limit int64) error {
	cfg, err := ort.NewArenaCfgV2(map[string]int{
		"max_mem":               int(limit),
		"arena_extend_strategy": 1,
	})
	if err != nil {
		return fmt.Errorf("arena configuration: %w", err)
	}
	defer cfg.Destroy()
	info, err := ort.GetMemoryInfo()
	if err != nil {
		return err
	}
	return ort.CreateAndRegisterAllocator(info, cfg)
}

// isAllocationRefused tells whether an ONNX Runtime run error is an
// allocation the arena refused (or the system could not give).
func isAllocationRefused(msg string) bool {
	for _, s := range []string{"Failed to allocate memory", "Available memory of", "bad_alloc", "bad allocation"} {
		if strings.Contains(msg, s) {
			return true
		}
	}
	return false
}

// errArenaRefused is a run's error when the arena refused an allocation;
// RunContext retries a batch one case at a time before it reports
// memoryRefused.
var errArenaRefused = errors.New("ONNX Runtime's arena refused an allocation")

// memoryRefused is the input error of a model that asked ONNX Runtime for
// more memory than the limit.
func memoryRefused(source string, limit int64) error {
	return inputerr.New(source, "%s: the model asked for more memory than the limit of %d MiB and was stopped; set %s to a larger number of MiB if the model is legitimate",
		ModelFile, limit>>20, ModelMemoryEnv)
}

// Not every allocation of ONNX Runtime goes through its arena: a Loop keeps
// a record of every iteration's scan outputs on the C++ heap (a Loop of
// INT64_MAX iterations whose scan output is an outer value grows by about
// 10 MB/s without asking the arena), and so do some kernels' scratch
// buffers. A run is therefore also watched from outside: it is stopped when
// the process's resident memory passes processCeiling.

// otherMemory is what the process may hold besides the arena: the Go
// heap's soft limit of 700 MiB (cmd/brightfold/memlimit.go) less what a
// scan takes once prepared, plus the library and the model's graph.
const otherMemory = 700 << 20

// runScratch is what one run may add to the process's resident memory
// besides the arena, in a process that already held more than
// otherMemory when the run began (the window, with scans and maps of
// several cases in memory).
const runScratch = 256 << 20

// ceilingPassedError is the cause of a run stopped by watchMemory.
type ceilingPassedError struct{ ceiling int64 }

func (e ceilingPassedError) Error() string {
	return fmt.Sprintf("process memory ceiling of %d MiB passed", e.ceiling>>20)
}

// memoryPoll is how often watchMemory reads the resident memory.
const memoryPoll = 20 * time.Millisecond

// processCeiling is the resident memory at which a run is stopped: the
// model memory limit plus otherMemory (956 MiB on the default settings),
// or, when the process held much before the run began (start bytes), what
// it held plus the limit and runScratch, so that a viewer with several
// cases in memory is not stopped by memory it holds for other reasons.
func processCeiling(limit, start int64) int64 {
	return max(limit+otherMemory, start+limit+runScratch)
}

// watchMemory cancels ctx with errMemoryCeiling when the process's resident
// memory passes ceiling, until ctx is done. Where /proc is absent it only
// waits.
func watchMemory(ctx context.Context, stop context.CancelCauseFunc, ceiling int64) {
	tick := time.NewTicker(memoryPoll)
	defer tick.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-tick.C:
			if rss, ok := residentBytes(); !ok {
				return
			} else if rss > ceiling {
				stop(ceilingPassedError{ceiling})
				return
			}
		}
	}
}

// residentBytes is the process's resident set (/proc/self/statm, in pages).
func residentBytes() (int64, bool) {
	b, err := os.ReadFile("/proc/self/statm")
	if err != nil {
		return 0, false
	}
	f := strings.Fields(string(b))
	if len(f) < 2 {
		return 0, false
	}
	pages, err := strconv.ParseInt(f[1], 10, 64)
	if err != nil {
		return 0, false
	}
	return pages * int64(os.Getpagesize()), true
}

// ceilingPassed is the input error of a run stopped by watchMemory.
func ceilingPassed(source string, limit, ceiling int64) error {
	return inputerr.New(source, "%s: while the model ran the process passed %d MiB of memory (the model memory limit of %d MiB plus %d MiB for the rest) and the run was stopped; set %s to a larger number of MiB if the model is legitimate",
		ModelFile, ceiling>>20, limit>>20, (ceiling-limit)>>20, ModelMemoryEnv)
}
