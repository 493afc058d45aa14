package parallel

import (
	"errors"
	"fmt"
	"sync/atomic"
	"testing"
)

// Each visits every index exactly once, with worker names in range.
func TestEachVisitsAll(t *testing.T) {
	for _, tc := range []struct{ n, workers int }{{0, 4}, {1, 4}, {7, 1}, {1000, 3}, {5, 0}, {3, 16}} {
		seen := make([]atomic.Int32, tc.n)
		nw := Workers(tc.n, tc.workers)
		Each(tc.n, tc.workers, func(w, k int) {
			if w < 0 || w >= nw {
				t.Errorf("n=%d: worker %d outside [0, %d)", tc.n, w, nw)
			}
			seen[k].Add(1)
		})
		for k := range seen {
			if c := seen[k].Load(); c != 1 {
				t.Errorf("n=%d workers=%d: index %d visited %d times", tc.n, tc.workers, k, c)
			}
		}
	}
}

// Chunks covers [0, n) with disjoint contiguous ranges.
func TestChunksCover(t *testing.T) {
	for _, n := range []int{0, 1, 2, 3, 10, 1001} {
		seen := make([]atomic.Int32, n)
		Chunks(n, func(lo, hi int) {
			if lo > hi || lo < 0 || hi > n {
				t.Errorf("n=%d: chunk [%d, %d)", n, lo, hi)
			}
			for k := lo; k < hi; k++ {
				seen[k].Add(1)
			}
		})
		for k := range seen {
			if c := seen[k].Load(); c != 1 {
				t.Errorf("n=%d: index %d covered %d times", n, k, c)
			}
		}
	}
}

func TestWorkers(t *testing.T) {
	if Workers(0, 4) != 1 || Workers(3, 8) != 3 || Workers(100, 2) != 2 || Workers(100, 0) < 1 {
		t.Errorf("Workers: %d %d %d %d", Workers(0, 4), Workers(3, 8), Workers(100, 2), Workers(100, 0))
	}
}

// A panic in a worker reaches the caller of Each and Chunks, where a
// deferred recover catches it, instead of ending the program from a
// goroutine nobody can recover in.
func TestPanicReachesCaller(t *testing.T) {
	for name, run := range map[string]func(){
		"Each": func() {
			Each(100, 4, func(_, k int) {
				if k == 57 {
					panic("boom")
				}
			})
		},
		"Chunks": func() {
			Chunks(100, func(lo, hi int) {
				if lo > 0 {
					panic("boom")
				}
			})
		},
	} {
		got := func() (r any) {
			defer func() { r = recover() }()
			run()
			return nil
		}()
		if got != "boom" && !(name == "Chunks" && got == nil && Workers(100, 0) == 1) {
			t.Errorf("%s: recovered %v, want the worker's panic", name, got)
		}
	}
}

// EachErr returns the error of the lowest failing index, skips indices not
// yet started after a failure, and visits everything when nothing fails.
func TestEachErr(t *testing.T) {
	var calls atomic.Int32
	if err := EachErr(100, 3, func(_, _ int) error { calls.Add(1); return nil }); err != nil || calls.Load() != 100 {
		t.Errorf("no failure: err %v, %d calls, want nil and 100", err, calls.Load())
	}
	calls.Store(0)
	err := EachErr(1000, 1, func(_, k int) error {
		calls.Add(1)
		if k == 7 || k == 9 {
			return fmt.Errorf("index %d", k)
		}
		return nil
	})
	if err == nil || err.Error() != "index 7" || calls.Load() != 8 {
		t.Errorf("one worker: err %v after %d calls, want index 7 after 8", err, calls.Load())
	}
	err = EachErr(1000, 4, func(_, k int) error {
		if k%100 == 42 {
			return fmt.Errorf("index %d", k)
		}
		return nil
	})
	if err == nil || err.Error() != "index 42" {
		t.Errorf("four workers: err %v, want index 42", err)
	}
	if EachErr(0, 2, func(_, _ int) error { return errors.New("called") }) != nil {
		t.Error("n = 0 called f")
	}
}
