package main

import (
	"os"
	"runtime/debug"
)

// softMemoryLimit is the Go heap's soft limit on the default settings: the
// garbage collector works harder as the heap nears it, so that transient
// buffers (an inflating data set, a model's bytes) are freed before the
// process passes 1 GiB. GOMEMLIMIT overrides it, as for any Go program.
const softMemoryLimit = 700 << 20

// setMemoryLimit applies softMemoryLimit unless GOMEMLIMIT is set.
func setMemoryLimit() {
	if os.Getenv("GOMEMLIMIT") == "" {
		debug.SetMemoryLimit(softMemoryLimit)
	}
}
