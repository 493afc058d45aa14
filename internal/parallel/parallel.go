// Package parallel runs loops over an index range on several goroutines.
// It is the one place where Brightfold's CPU-bound loops (voxel decoding,
// reorientation, phantom rendering, preprocessing) are spread over cores.
package parallel

import (
	"runtime"
	"sync"
	"sync/atomic"
)

// Workers is the number of goroutines for n items when the caller asks for
// workers (≤ 0: all cores, GOMAXPROCS), never more than n and at least 1.
func Workers(n, workers int) int {
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	return max(1, min(workers, n))
}

// Each calls f(w, k) for every k in [0, n), handing out indices one at a
// time to Workers(n, workers) goroutines; w in [0, workers) names the
// goroutine (for per-goroutine scratch space). With one worker it runs in
// the caller's goroutine, in order.
func Each(n, workers int, f func(w, k int)) {
	if n <= 0 {
		return
	}
	nw := Workers(n, workers)
	if nw == 1 {
		for k := 0; k < n; k++ {
			f(0, k)
		}
		return
	}
	var next atomic.Int64
	var wg sync.WaitGroup
	var p panicked
	for w := 0; w < nw; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			defer p.catch()
			for {
				k := int(next.Add(1) - 1)
				if k >= n {
					return
				}
				f(w, k)
			}
		}()
	}
	wg.Wait()
	p.rethrow()
}

// Chunks splits [0, n) into one contiguous chunk per core and calls
// f(lo, hi) for each, concurrently; with one core, or n ≤ 1, it calls
// f(0, n) in the caller's goroutine.
func Chunks(n int, f func(lo, hi int)) {
	if n <= 0 {
		return
	}
	nw := Workers(n, 0)
	if nw == 1 {
		f(0, n)
		return
	}
	var wg sync.WaitGroup
	var p panicked
	for i := 0; i < nw; i++ {
		lo, hi := n*i/nw, n*(i+1)/nw
		wg.Add(1)
		go func() {
			defer wg.Done()
			defer p.catch()
			f(lo, hi)
		}()
	}
	wg.Wait()
	p.rethrow()
}

// panicked carries the first panic of a worker goroutine back to the
// goroutine that started the loop, so that a caller's recover (the viewer's
// background tasks have one) sees it; a panic left in a worker would end the
// whole program.
type panicked struct {
	mu    sync.Mutex
	value any
	set   bool
}

// catch records a panic of the calling worker; use it deferred.
func (p *panicked) catch() {
	if r := recover(); r != nil {
		p.mu.Lock()
		if !p.set {
			p.value, p.set = r, true
		}
		p.mu.Unlock()
	}
}

// rethrow panics again, in the caller, with the first recorded value.
func (p *panicked) rethrow() {
	if p.set {
		panic(p.value)
	}
}

// EachErr calls f(w, k) for indices in [0, n) like Each, and returns the
// error of the lowest index whose call fails (nil when none does). Once a
// call has failed, higher indices not yet started are skipped; lower ones
// still run, so the error returned is the same on every run when each
// index fails or succeeds regardless of scheduling.
func EachErr(n, workers int, f func(w, k int) error) error {
	if n <= 0 {
		return nil
	}
	errs := make([]error, n)
	var lowest atomic.Int64 // lowest failed index so far; n when none
	lowest.Store(int64(n))
	Each(n, workers, func(w, k int) {
		if int64(k) > lowest.Load() {
			return
		}
		if errs[k] = f(w, k); errs[k] != nil {
			for {
				l := lowest.Load()
				if int64(k) >= l || lowest.CompareAndSwap(l, int64(k)) {
					break
				}
			}
		}
	})
	for _, err := range errs {
		if err != nil {
			return err
		}
	}
	return nil
}
