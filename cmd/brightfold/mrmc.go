package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"brightfold/internal/atomicfile"
	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
	"brightfold/internal/reading"
	"brightfold/internal/stats"
)

const mrmcUsage = "mrmc INPUT... [--cov delong|jackknife] [--readers random|fixed] [--json] [--out DIR]"

// runMRMC analyses a reader study: session files or CSV files of reads.
func runMRMC(e *env, args []string) error {
	fs := quietFlags(e, "mrmc")
	cov := fs.String("cov", string(stats.CovDeLong), "covariances of the AUROCs: delong or jackknife")
	readers := fs.String("readers", string(stats.RandomReaders), "readers factor: random (readers like these) or fixed (these readers)")
	asJSON := fs.Bool("json", false, "print the analysis as JSON")
	out := fs.String("out", "", "write mrmc.json, reads_by_case.csv and mrmc.pdf into this folder")
	if helpRequested(e, fs, args, mrmcUsage,
		"INPUT: session files, or CSV files with columns reader, condition (or treatment), case, truth (0/1), rating") {
		return nil
	}
	pos, err := parseFlags(fs, args)
	if err != nil {
		return err
	}
	if len(pos) == 0 {
		return usageError("usage: brightfold %s", mrmcUsage)
	}
	opts := reading.AnalysisOptions{Cov: stats.CovMethod(*cov), Readers: stats.ReadersFactor(*readers)}
	if opts.Cov != stats.CovDeLong && opts.Cov != stats.CovJackknife {
		return usageError("--cov %q: want delong or jackknife", *cov)
	}
	if opts.Readers != stats.RandomReaders && opts.Readers != stats.FixedReaders {
		return usageError("--readers %q: want random or fixed", *readers)
	}
	reads, err := reading.LoadReads(pos)
	if err != nil {
		return err
	}
	a, err := reading.Analyse(reads, opts)
	var ie *inputerr.Error
	if errors.As(err, &ie) && ie.Path == "" {
		return inputerr.New(strings.Join(pos, ", "), "%v", ie.Err)
	}
	if err != nil {
		return err
	}
	if *out != "" {
		if err := mrmcWriteOut(*out, a); err != nil {
			return err
		}
	}
	if *asJSON {
		enc := json.NewEncoder(e.stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(a)
	}
	fmt.Fprintln(e.stdout, notice.Full)
	for _, l := range reading.ReaderStudyLines(a) {
		fmt.Fprintln(e.stdout, l)
	}
	if *out != "" {
		fmt.Fprintf(e.stdout, "Wrote mrmc.json, reads_by_case.csv and mrmc.pdf in %s.\n", *out)
	}
	return nil
}

func mrmcWriteOut(dir string, a *reading.Analysis) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return inputerr.Wrap(dir, err)
	}
	if err := atomicfile.Write(filepath.Join(dir, "mrmc.json"), func(w io.Writer) error {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(a)
	}); err != nil {
		return err
	}
	if err := atomicfile.Write(filepath.Join(dir, "reads_by_case.csv"), func(w io.Writer) error {
		return reading.WriteCaseTable(w, a)
	}); err != nil {
		return err
	}
	return atomicfile.Write(filepath.Join(dir, "mrmc.pdf"), func(w io.Writer) error {
		return reading.ReaderStudyPDF(w, a)
	})
}
