package train

import (
	"bytes"
	"crypto/sha256"
	"encoding/gob"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"sync"
	"sync/atomic"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/atomicfile"
	"brightfold/internal/parallel"
	"brightfold/internal/phantom"
)

// CaseSpec names one phantom: cohort seed, case index and shift.
type CaseSpec struct {
	Seed  uint64
	Index int
	Shift phantom.Shift
}

// Specs returns the in-distribution cases [from, from+n) of a cohort seed,
// with the given shift.
func Specs(seed uint64, from, n int, shift phantom.Shift) []CaseSpec {
	out := make([]CaseSpec, n)
	for i := range out {
		out[i] = CaseSpec{Seed: seed, Index: from + i, Shift: shift}
	}
	return out
}

// Case is one generated and preprocessed phantom: the model input in grid
// order, the phantom's covariates and label, and the fit-check measurements.
// Err is set instead when preprocessing refused the scan (possible for
// shifted variants; an in-distribution case that fails is an error of
// Generate).
type Case struct {
	Spec    CaseSpec
	Subject phantom.Subject
	X       []float32
	Facts   inference.CaseFacts
	Err     string
}

// Example returns the case as a training example.
func (c *Case) Example() Example { return Example{X: c.X, Label: c.Subject.Label} }

// Generate renders the phantoms at 1 mm (phantom.Generate), preprocesses
// each with preprocess.Prepare exactly as the card states, and measures it
// with inference.MeasureCase at the quantile levels. Cases are made in
// parallel on workers goroutines; the result is in spec order and does not
// depend on the number of workers. progress, when set, is called after each
// case with the number done.
func Generate(specs []CaseSpec, p preprocess.Spec, levels []float64, workers int, progress func(done, total int)) ([]Case, error) {
	out := make([]Case, len(specs))
	var done atomic.Int64
	var mu sync.Mutex
	err := parallel.EachErr(len(specs), workers, func(_, i int) error {
		c, err := makeCase(specs[i], p, levels)
		if err != nil {
			return err
		}
		out[i] = c
		if progress != nil {
			d := int(done.Add(1))
			mu.Lock()
			progress(d, len(specs))
			mu.Unlock()
		}
		return nil
	})
	return out, err
}

func makeCase(s CaseSpec, p preprocess.Spec, levels []float64) (Case, error) {
	ph, err := phantom.Generate(s.Seed, s.Index, phantom.Options{Shift: s.Shift, Workers: 1})
	if err != nil {
		return Case{}, fmt.Errorf("phantom seed %d case %d (%s): %w", s.Seed, s.Index, s.Shift, err)
	}
	c := Case{Spec: s, Subject: ph.Subject}
	pr, err := preprocess.Prepare(ph.Volume, p)
	if err != nil {
		if s.Shift == phantom.ShiftNone || s.Shift == "" {
			return Case{}, fmt.Errorf("preprocess %s (seed %d): %w", ph.Subject.ID, s.Seed, err)
		}
		c.Err = err.Error()
		return c, nil
	}
	c.X = pr.Tensor.GridValues()
	c.Facts = inference.MeasureCase(ph.Volume, pr, levels)
	return c, nil
}

// Examples converts cases to training examples.
func Examples(cs []Case) []Example {
	out := make([]Example, len(cs))
	for i := range cs {
		out[i] = cs[i].Example()
	}
	return out
}

// GenerateCached is Generate with a cache folder for development runs:
// cases are stored in gob files of up to 100 cases, each named after a hash
// of its specs, the preprocessing and the levels. The key does not cover the
// phantom generator's code, so the cache must be cleared when package
// phantom changes; release runs (`make demo-model`) do not use it. An empty
// dir disables the cache.
func GenerateCached(dir string, specs []CaseSpec, p preprocess.Spec, levels []float64, workers int, progress func(done, total int)) ([]Case, error) {
	if dir == "" {
		return Generate(specs, p, levels, workers, progress)
	}
	var out []Case
	for lo := 0; lo < len(specs); lo += 100 {
		chunk := specs[lo:min(lo+100, len(specs))]
		cs, err := generateChunk(dir, chunk, p, levels, workers)
		if err != nil {
			return nil, err
		}
		out = append(out, cs...)
		if progress != nil {
			progress(len(out), len(specs))
		}
	}
	return out, nil
}

func generateChunk(dir string, specs []CaseSpec, p preprocess.Spec, levels []float64, workers int) ([]Case, error) {
	key, err := json.Marshal(struct {
		S []CaseSpec
		P preprocess.Spec
		L []float64
	}{specs, p, levels})
	if err != nil {
		return nil, err
	}
	sum := sha256.Sum256(key)
	file := filepath.Join(dir, "cases-"+hex.EncodeToString(sum[:8])+".gob")
	if f, err := os.Open(file); err == nil {
		defer f.Close()
		var cs []Case
		if err := gob.NewDecoder(f).Decode(&cs); err == nil && len(cs) == len(specs) {
			return cs, nil
		}
	}
	cs, err := Generate(specs, p, levels, workers, nil)
	if err != nil {
		return nil, err
	}
	var buf bytes.Buffer
	if err := gob.NewEncoder(&buf).Encode(cs); err != nil {
		return nil, err
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, err
	}
	return cs, atomicfile.WriteBytes(file, buf.Bytes())
}
