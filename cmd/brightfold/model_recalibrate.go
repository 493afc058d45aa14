package main

import (
	"context"
	"fmt"
	"os"
	"os/signal"
	"syscall"

	"brightfold/inference"
	"brightfold/inference/modelmake"
	"brightfold/internal/inputerr"
	"brightfold/internal/manifest"
	"brightfold/internal/notice"
	"brightfold/internal/ortlib"
)

const modelRecalUsage = "usage: brightfold model recalibrate MODEL --cases CASES --out NEW_MODEL [--site NAME] [--label-column COL]"

// runModelRecalibrate writes a new model folder whose card recalibrates the
// parent's probabilities for a new site (model.onnx copied unchanged).
func runModelRecalibrate(e *env, args []string) error {
	fs := newFlags(e, "model recalibrate")
	cases := fs.String("cases", "", "the site's labelled cases: CSV manifest or BIDS folder")
	labelCol := fs.String("label-column", "", "participants.tsv column holding the class names (BIDS folder)")
	out := fs.String("out", "", "new model folder to create (must not exist)")
	site := fs.String("site", "", "site name (default: the manifest's single site column value, else \"new-site\")")
	seed := fs.Uint64("seed", 1, "seed of the bootstrap intervals")
	skip := fs.Bool("skip-unreadable", false, "leave out scans that cannot be prepared (listed) instead of refusing")
	ortLib := fs.String("ort-lib", "", "path of the ONNX Runtime library "+ortlib.FileName)
	threads := fs.Int("threads", 0, "ONNX Runtime intra-op threads (default: all cores)")
	fs.Usage = func() { fmt.Fprintln(e.stderr, modelRecalUsage); fs.PrintDefaults() }
	pos, err := parseFlags(fs, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 || *cases == "" || *out == "" {
		return usageError("%s", modelRecalUsage)
	}
	if _, err := os.Stat(*out); err == nil {
		return inputerr.New(*out, "already exists; recalibrate creates a new model folder")
	}
	mf, err := inference.LoadModelFolder(pos[0])
	if err != nil {
		return err
	}
	m, err := manifest.Read(*cases, *labelCol)
	if err != nil {
		return err
	}
	if *site == "" {
		*site = "new-site"
		if s := m.Sites(); len(s) == 1 {
			*site = s[0]
		}
	}
	lib, err := ortlib.Find(*ortLib)
	if err != nil {
		return inputerr.New(*ortLib, "%v", err)
	}
	if err := inference.InitRuntime(lib); err != nil {
		return err
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	fmt.Fprintln(e.stderr, notice.Full)
	prog, finish := progressReporter(e.stderr, len(m.Cases), "cases")
	card, _, err := modelmake.Recalibrate(ctx, mf, m, *site, modelmake.Options{Seed: *seed, SkipUnreadable: *skip, Threads: *threads, Progress: prog})
	finish(err == nil)
	if err != nil {
		if ctx.Err() != nil {
			return inputerr.New(*out, "interrupted; nothing was written")
		}
		return err
	}
	if err := writeFolderWhole(*out, card, mf.Model, mf.Card.AlignmentFileBytes()); err != nil {
		return err
	}
	r := card.Provenance.Recalibration
	fmt.Fprintf(e.stdout, "%s\nwrote %s: site %s, %d cases, chosen: %s (model.onnx unchanged, sha256 %s)\n", notice.Full, *out, r.Site, r.N, r.Method, card.ModelSHA256)
	for _, t := range r.Tests {
		fmt.Fprintf(e.stdout, "  likelihood-ratio test %s: chi2 = %.3f, %d df, p = %.4g\n", t.Name, t.Statistic, t.DF, t.P)
	}
	fmt.Fprintln(e.stdout, "before:")
	writeFigureTable(cardWriter{w: e.stdout}, r.Before)
	fmt.Fprintln(e.stdout, "after (in-sample):")
	writeFigureTable(cardWriter{w: e.stdout}, r.After)
	return nil
}
