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
	for w := 0; w < nw; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
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
	for i := 0; i < nw; i++ {
		lo, hi := n*i/nw, n*(i+1)/nw
		wg.Add(1)
		go func() {
			defer wg.Done()
			f(lo, hi)
		}()
	}
	wg.Wait()
}
