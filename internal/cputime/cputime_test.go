package cputime

import (
	"runtime"
	"testing"
	"time"
)

// Seconds grows while this goroutine spins and never runs ahead of wall
// time times the cores by much (getrusage(2) counts CPU time of all threads).
func TestSecondsGrowsWithWork(t *testing.T) {
	if runtime.GOOS == "windows" || runtime.GOOS == "plan9" {
		t.Skip("not measured on this platform")
	}
	c0, w0 := Seconds(), time.Now()
	x := 0.0
	for time.Since(w0) < 200*time.Millisecond {
		x += 1e-9
	}
	c1, wall := Seconds(), time.Since(w0).Seconds()
	if !(c1 > c0) {
		t.Errorf("CPU seconds did not grow: %v then %v (sum %v)", c0, c1, x)
	}
	if c1-c0 > wall*float64(runtime.NumCPU())+0.5 {
		t.Errorf("%.3f CPU seconds in %.3f s of wall time on %d cores", c1-c0, wall, runtime.NumCPU())
	}
}
