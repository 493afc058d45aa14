//go:build !unix

package cputime

// usage is not measured on this platform.
func usage() (user, system float64, ok bool) { return 0, 0, false }
