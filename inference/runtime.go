package inference

import (
	"context"
	"errors"
	"fmt"
	"os"
	"runtime"
	"strings"
	"sync"
	"time"

	"brightfold/inference/preprocess"
	"brightfold/internal/inputerr"
	"brightfold/internal/ortlib"
	ort "github.com/yalue/onnxruntime_go"
)

// ONNX Runtime keeps one environment per process (its C library is
// process-global), so the environment is set up once here, guarded by a
// mutex; sessions are per model folder.
var ortEnv struct {
	sync.Mutex
	lib    string
	memory int64 // bytes of the registered arena (ModelMemoryLimit)
	// retry serialises the runs repeated after the arena refused them
	retry sync.Mutex
}

// InitRuntime loads the ONNX Runtime library at libPath (see ortlib.Find) and
// creates the process's environment with its bounded CPU allocator (see
// ModelMemoryLimit); later calls with the same path do nothing. A missing or
// unusable library is an input error with the command that installs the
// right one.
func InitRuntime(libPath string) error {
	ortEnv.Lock()
	defer ortEnv.Unlock()
	if ortEnv.lib != "" {
		if ortEnv.lib != libPath {
			return fmt.Errorf("ONNX Runtime already loaded from %s; cannot switch to %s in one process", ortEnv.lib, libPath)
		}
		return nil
	}
	ort.SetSharedLibraryPath(libPath)
	if err := ort.InitializeEnvironment(ortLogLevel()); err != nil {
		// the loader's message may end in an empty dlerror ("...: ")
		why := strings.TrimRight(strings.TrimSpace(err.Error()), ":")
		return inputerr.New(libPath, "cannot use this ONNX Runtime library (Brightfold needs %s of ONNX Runtime 1.30.0, C API 24): %s; %s",
			ortlib.FileName, why, ortlib.InstallHint)
	}
	limit := ModelMemoryLimit()
	if err := registerBoundedAllocator(limit); err != nil {
		ort.DestroyEnvironment()
		return fmt.Errorf("ONNX Runtime memory limit of %d MiB: %w", limit>>20, err)
	}
	ortEnv.lib, ortEnv.memory = libPath, limit
	return nil
}

// SessionOptions tune a session.
type SessionOptions struct {
	// IntraOpThreads is ONNX Runtime's intra-op thread count; 0 (or more
	// than the cores) means all cores.
	IntraOpThreads int
	// MaxBatch bounds how many cases one Run carries when the model's batch
	// dimension is dynamic (0 means 8).
	MaxBatch int
}

// Session runs one model folder's model on the CPU. It is made once per model folder and
// reused; Run may be called from several goroutines.
type Session struct {
	mf       *ModelFolder
	s        *ort.DynamicAdvancedSession
	outNames []string
	maxBatch int
}

// Output is one case's model outputs.
type Output struct {
	Logits   []float64
	Features []float64
}

// NewSession makes the ONNX Runtime session for b on the CPU execution
// provider. InitRuntime must have been called.
func NewSession(b *ModelFolder, opt SessionOptions) (*Session, error) {
	if !ort.IsInitialized() {
		return nil, errors.New("ONNX Runtime is not initialised (call InitRuntime)")
	}
	so, err := ort.NewSessionOptions()
	if err != nil {
		return nil, fmt.Errorf("session options: %w", err)
	}
	defer so.Destroy()
	threads := opt.IntraOpThreads
	if threads <= 0 || threads > runtime.NumCPU() {
		// more threads than cores only slow ONNX Runtime down (and many
		// hundreds can exhaust a process limit), so the count is bounded
		threads = runtime.NumCPU()
	}
	if err := so.SetLogSeverityLevel(ortSessionLogLevel()); err != nil {
		return nil, fmt.Errorf("session log level: %w", err)
	}
	if err := so.SetIntraOpNumThreads(threads); err != nil {
		return nil, fmt.Errorf("intra-op threads: %w", err)
	}
	if err := so.SetInterOpNumThreads(1); err != nil {
		return nil, fmt.Errorf("inter-op threads: %w", err)
	}
	if err := so.AddSessionConfigEntry(useEnvAllocators, "1"); err != nil {
		return nil, fmt.Errorf("session allocator: %w", err)
	}
	c := b.Card
	outs := []string{c.Outputs.Logits, c.Outputs.Features}
	s, err := ort.NewDynamicAdvancedSessionWithONNXData(b.SessionModel, []string{c.Input.Name}, outs, so)
	if err != nil && isAllocationRefused(err.Error()) {
		return nil, memoryRefused(b.Source, modelMemory())
	}
	if err != nil {
		return nil, inputerr.New(b.Source, "ONNX Runtime cannot load %s: %v", ModelFile, err)
	}
	mb := opt.MaxBatch
	if mb <= 0 {
		mb = 8
	}
	if !b.Graph.BatchDynamic {
		mb = int(c.Input.Shape[0])
		if mb < 1 {
			mb = 1
		}
	}
	return &Session{mf: b, s: s, outNames: outs, maxBatch: mb}, nil
}

// ModelFolder is the session's model folder.
func (s *Session) ModelFolder() *ModelFolder { return s.mf }

// Close frees the session.
func (s *Session) Close() error {
	if s.s == nil {
		return nil
	}
	err := s.s.Destroy()
	s.s = nil
	return err
}

// Run feeds the tensors (each one case, shape [1, 1, ...] in the card's
// layout) through the model, batching them when the batch is dynamic, and
// returns one Output per tensor.
func (s *Session) Run(ts []*preprocess.Tensor) ([]Output, error) {
	return s.RunContext(context.Background(), ts)
}

// RunContext is Run that stops when ctx is done: between batches, and
// inside a batch through ONNX Runtime's run-options terminate flag, so that
// a long model run is cancelled within one operator. It then returns ctx's
// error.
func (s *Session) RunContext(ctx context.Context, ts []*preprocess.Tensor) ([]Output, error) {
	var out []Output
	for lo := 0; lo < len(ts); lo += s.maxBatch {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		hi := min(len(ts), lo+s.maxBatch)
		o, err := s.runBatch(ctx, ts[lo:hi])
		if errors.Is(err, errArenaRefused) {
			o, err = s.retryAlone(ctx, ts[lo:hi])
		}
		if errors.Is(err, errArenaRefused) {
			return nil, memoryRefused(s.mf.Source, modelMemory())
		}
		if err != nil {
			return nil, err
		}
		out = append(out, o...)
	}
	return out, nil
}

// retryAlone runs a batch the arena refused again, one case per run (when
// the batch is dynamic) and one refused run at a time in the process: the
// arena is shared by all sessions and concurrent runs, and a batch or a
// neighbour may have taken what a single case needs.
func (s *Session) retryAlone(ctx context.Context, ts []*preprocess.Tensor) ([]Output, error) {
	ortEnv.retry.Lock()
	defer ortEnv.retry.Unlock()
	if !s.mf.Graph.BatchDynamic {
		return s.runBatch(ctx, ts)
	}
	var out []Output
	for i := range ts {
		o, err := s.runBatch(ctx, ts[i:i+1])
		if err != nil {
			return nil, err
		}
		out = append(out, o...)
	}
	return out, nil
}

func (s *Session) runBatch(ctx context.Context, ts []*preprocess.Tensor) ([]Output, error) {
	c := s.mf.Card
	per := 1
	for _, d := range c.Input.Shape[1:] {
		per *= int(d)
	}
	n := len(ts)
	if !s.mf.Graph.BatchDynamic && n != s.maxBatch {
		// a fixed batch larger than the cases at hand: pad with zeros
		n = s.maxBatch
	}
	data := make([]float32, n*per)
	for i, t := range ts {
		if len(t.Data) != per {
			return nil, fmt.Errorf("tensor %d holds %d values, the model input needs %d", i, len(t.Data), per)
		}
		if t.Layout != c.Input.Layout {
			return nil, fmt.Errorf("tensor %d is in layout %s, the card says %s", i, t.Layout, c.Input.Layout)
		}
		copy(data[i*per:], t.Data)
	}
	shape := append([]int64{int64(n)}, c.Input.Shape[1:]...)
	in, err := ort.NewTensor(ort.NewShape(shape...), data)
	if err != nil {
		return nil, fmt.Errorf("input tensor: %w", err)
	}
	defer in.Destroy()
	outs := make([]ort.Value, len(s.outNames))
	if err := s.runCancellable(ctx, in, outs); err != nil {
		return nil, err
	}
	defer func() {
		for _, o := range outs {
			if o != nil {
				o.Destroy()
			}
		}
	}()
	logits, err := perCase(outs[0], s.outNames[0], n)
	if err != nil {
		return nil, err
	}
	feats, err := perCase(outs[1], s.outNames[1], n)
	if err != nil {
		return nil, err
	}
	res := make([]Output, len(ts))
	for i := range res {
		res[i] = Output{Logits: logits[i], Features: feats[i]}
		if len(res[i].Logits) != c.NumLogits() {
			return nil, fmt.Errorf("output %s has %d values per case, the card needs %d logits", s.outNames[0], len(res[i].Logits), c.NumLogits())
		}
	}
	return res, nil
}

// runCancellable runs the session once within the run budget (RunBudget):
// a watcher sets the run's terminate flag when ctx is done or the budget is
// spent. A run that ignores the flag (a graph whose Loop body has no node at
// which ONNX Runtime checks it) is abandoned after a grace period, with an
// input error naming the budget, and the command line exits.
func (s *Session) runCancellable(ctx context.Context, in ort.Value, outs []ort.Value) error {
	budget := RunBudget()
	ctx, stop := context.WithCancelCause(ctx)
	defer stop(nil)
	start, _ := residentBytes()
	go watchMemory(ctx, stop, processCeiling(modelMemory(), start))
	ctx, cancel := context.WithTimeout(ctx, budget)
	defer cancel()
	opts, err := ort.NewRunOptions()
	if err != nil {
		return fmt.Errorf("ONNX Runtime run options: %w", err)
	}
	ran := make(chan error, 1)
	go func() {
		ran <- s.s.RunWithOptions([]ort.Value{in}, outs, opts)
	}()
	select {
	case err = <-ran:
	case <-ctx.Done():
		opts.Terminate()
		grace := time.NewTimer(runGrace)
		defer grace.Stop()
		select {
		case err = <-ran:
		case <-grace.C:
			// the run goes on in its goroutine; its options stay alive with it
			return runOverBudget(ctx, budget, s.mf.Source)
		}
	}
	opts.Destroy()
	if ctx.Err() != nil {
		for i, o := range outs {
			if o != nil {
				o.Destroy()
				outs[i] = nil
			}
		}
		return runOverBudget(ctx, budget, s.mf.Source)
	}
	if err != nil && isAllocationRefused(err.Error()) {
		return errArenaRefused
	}
	if err != nil {
		// the session loaded, so a failing run means the graph cannot take
		// the card's input: a problem of the model folder
		return inputerr.New(s.mf.Source, "ONNX Runtime could not run the model on the card's input shape %v: %v", s.mf.Card.Input.Shape, ortMessage(err.Error()))
	}
	return nil
}

// modelMemory is the limit of the registered allocator.
func modelMemory() int64 {
	ortEnv.Lock()
	defer ortEnv.Unlock()
	return ortEnv.memory
}

// ortMessage shortens an ONNX Runtime run error to one readable line: the
// node and the reason, without the C++ source location and signature.
func ortMessage(s string) string {
	s = firstLine(s)
	head, rest, ok := strings.Cut(s, " Status Message: ")
	if !ok {
		return s
	}
	if _, after, found := strings.Cut(rest, " was false. "); found {
		rest = after
	}
	return head + ": " + rest
}

// firstLine is s up to its first line break.
func firstLine(s string) string {
	if i := strings.IndexAny(s, "\r\n"); i >= 0 {
		return s[:i]
	}
	return s
}

// runGrace is how long a terminated run may take to stop.
const runGrace = 5 * time.Second

// runOverBudget is the error of a run stopped by ctx: the caller's
// cancellation as it is, or an input error for a spent budget or a passed
// memory ceiling.
func runOverBudget(ctx context.Context, budget time.Duration, source string) error {
	if ce := (ceilingPassedError{}); errors.As(context.Cause(ctx), &ce) {
		return ceilingPassed(source, modelMemory(), ce.ceiling)
	}
	if errors.Is(context.Cause(ctx), context.DeadlineExceeded) && errors.Is(ctx.Err(), context.DeadlineExceeded) {
		return inputerr.New(source, "%s: one model run took longer than the budget of %s and was stopped (a graph that never ends?); set %s to give it more seconds", ModelFile, budget, RunBudgetEnv)
	}
	return ctx.Err()
}

// perCase splits a float32 output of batch n into n rows (flattening any
// trailing dimensions, e.g. [N, F, 1, 1, 1] features).
func perCase(v ort.Value, name string, n int) ([][]float64, error) {
	t, ok := v.(*ort.Tensor[float32])
	if !ok {
		return nil, fmt.Errorf("output %s is not a float32 tensor", name)
	}
	d := t.GetData()
	sh := t.GetShape()
	if len(sh) == 0 || sh[0] != int64(n) || len(d)%n != 0 {
		return nil, fmt.Errorf("output %s has shape %v, want batch %d first", name, sh, n)
	}
	per := len(d) / n
	rows := make([][]float64, n)
	for i := range rows {
		rows[i] = make([]float64, per)
		for j := range rows[i] {
			rows[i][j] = float64(d[i*per+j])
		}
	}
	return rows, nil
}

// ORTLogEnv asks for ONNX Runtime's own log lines on stderr ("warning",
// "error"); by default only fatal ones, so that its messages never reach the
// terminal unasked (Brightfold reports the problems itself).
const ORTLogEnv = "BRIGHTFOLD_ORT_LOG"

func ortLogLevel() ort.EnvironmentOption {
	switch os.Getenv(ORTLogEnv) {
	case "verbose":
		return ort.WithLogLevelVerbose()
	case "info":
		return ort.WithLogLevelInfo()
	case "warning":
		return ort.WithLogLevelWarning()
	case "error":
		return ort.WithLogLevelError()
	}
	return ort.WithLogLevelFatal()
}

func ortSessionLogLevel() ort.LoggingLevel {
	switch os.Getenv(ORTLogEnv) {
	case "verbose":
		return ort.LoggingLevelVerbose
	case "info":
		return ort.LoggingLevelInfo
	case "warning":
		return ort.LoggingLevelWarning
	case "error":
		return ort.LoggingLevelError
	}
	return ort.LoggingLevelFatal
}
