//go:build unix

package viewer

import (
	"syscall"
	"time"
)

// processCPU is the CPU time (user + system) this process has used, so that
// benchmarks can report CPU per operation on a machine shared with other jobs.
func processCPU() time.Duration {
	var ru syscall.Rusage
	if syscall.Getrusage(syscall.RUSAGE_SELF, &ru) != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
