package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"strconv"
	"syscall"
	"time"

	"brightfold/internal/notice"
	"brightfold/internal/phantom"
)

// runDemo implements `brightfold demo cohort DIR [--n N] [--seed S] [--shifts]`.
func runDemo(e *env, args []string) error {
	if len(args) > 0 && isHelpArg(args[0]) {
		fmt.Fprintln(e.stdout, "usage: brightfold demo cohort DIR [--n N] [--seed S] [--shifts]\n"+notice.Full)
		return nil
	}
	if len(args) == 0 || args[0] != "cohort" {
		return usageError("usage: brightfold demo cohort DIR [--n N] [--seed S] [--shifts]")
	}
	fs := newFlags(e, "demo cohort")
	// Errors come back as one line through parseFlags; help only when asked.
	fs.SetOutput(io.Discard)
	fs.Usage = func() {}
	n := fs.Int("n", 20, "number of in-distribution cases")
	seed := fs.String("seed", "1", "cohort seed (unsigned integer)")
	shifts := fs.Bool("shifts", false, "add shifted variants (CT, T2, thick slices, cropped, flipped, noisy, child)")
	for _, a := range args[1:] {
		if a == "-h" || a == "-help" || a == "--help" {
			fmt.Fprintln(e.stdout, "usage: brightfold demo cohort DIR [--n N] [--seed S] [--shifts]")
			printFlags(e.stdout, fs)
			fmt.Fprintln(e.stdout, notice.Full)
			return nil
		}
	}
	pos, err := parseFlags(fs, args[1:])
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usageError("usage: brightfold demo cohort DIR [--n N] [--seed S] [--shifts] (got %d folders)", len(pos))
	}
	s, err := strconv.ParseUint(*seed, 10, 64)
	if err != nil {
		return usageError("--seed %q is not an unsigned integer", *seed)
	}
	if *n < 1 || *n > 100000 {
		return usageError("--n %d is outside 1..100000", *n)
	}
	fmt.Fprintln(e.stderr, notice.Full)
	// An interrupt stops the writing and removes the partial cohort.
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	start := time.Now()
	rows, err := phantom.WriteCohort(pos[0], phantom.WriteOptions{N: *n, Seed: s, Shifts: *shifts,
		Progress: e.stderr, Context: ctx})
	if err != nil {
		return err
	}
	fmt.Fprintf(e.stderr, "brightfold: %d synthetic cases in %s (%.1f s); table %s\n",
		len(rows), pos[0], time.Since(start).Seconds(), phantom.CohortFile)
	return nil
}
