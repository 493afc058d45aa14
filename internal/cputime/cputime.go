// Package cputime reads the CPU time (user plus system) this process has
// used, so that timings on a machine shared with other jobs can report CPU
// seconds beside wall time.
package cputime

import "math"

// Seconds is the process's user plus system CPU time so far, in seconds;
// NaN where it cannot be measured.
func Seconds() float64 {
	u, s, ok := usage()
	if !ok {
		return math.NaN()
	}
	return u + s
}
