// Command evaluate is the developer tool behind `make evaluate`: it scores
// fresh synthetic phantoms (in memory, in-distribution and every shift type)
// and Debian's real reference scans with a model folder through ONNX
// Runtime, computes the evaluation figures of package study, checks every
// AUROC and ECE against sklearn with Debian's Python, prints a table and
// writes evaluation.json, cases.csv and evaluation.md.
//
//	go run ./tools/evaluate -out out/evaluation -doc docs/evaluation.md
//	go run ./tools/evaluate -model MODEL -n 40 -per-shift 4 -out /tmp/ev
//	go run ./cmd/evaluate -maps -n 50 -doc docs/evaluation.md
//
// Research use only. Not a diagnosis.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"os"
	"os/signal"
	"path/filepath"
	"runtime"

	"brightfold/inference"
	"brightfold/internal/inputerr"
	"brightfold/internal/ortlib"
	"brightfold/internal/study"
)

type options struct {
	model, out, doc, ortLib string
	seed                    uint64
	n, perShift, workers    int
	noReal, noReference     bool
	maps, ruleSearch        bool
}

func main() {
	var o options
	flag.StringVar(&o.model, "model", "", "model folder folder or .zip (default: "+defaultModelFolderName+")")
	flag.StringVar(&o.out, "out", "out/evaluation", "folder for evaluation.json, cases.csv and evaluation.md")
	flag.StringVar(&o.doc, "doc", "", "Markdown document whose figures block to refresh (e.g. docs/evaluation.md)")
	flag.StringVar(&o.ortLib, "ort-lib", "", "path of the ONNX Runtime library "+ortlib.FileName)
	flag.Uint64Var(&o.seed, "seed", study.DefaultSeed, "phantom cohort seed (must not be a training or fitting seed)")
	flag.IntVar(&o.n, "n", 200, "fresh in-distribution phantoms (with -maps or -rule-search: pattern-positive phantoms, default 50)")
	flag.IntVar(&o.perShift, "per-shift", 20, "phantoms of each shift type")
	flag.IntVar(&o.workers, "workers", 0, "cases at once (default: all CPUs)")
	flag.BoolVar(&o.noReal, "no-real", false, "skip the real reference scans")
	flag.BoolVar(&o.noReference, "no-reference", false, "skip the sklearn check (figures are then unchecked)")
	flag.BoolVar(&o.maps, "maps", false, "measure the relevance maps instead (-n pattern-positive phantoms of -seed, default 20261210; make evaluate-maps)")
	flag.BoolVar(&o.ruleSearch, "rule-search", false, "compare the LRP composite candidates and apply the choice rule instead (-n pattern-positive phantoms of -seed, default the tuning seed 20261230; make evaluate-lrp-rules)")
	flag.Parse()
	if flag.NArg() > 0 {
		fmt.Fprintf(os.Stderr, "evaluate: unexpected argument %q\n", flag.Arg(0))
		os.Exit(2)
	}
	nSet := false
	flag.Visit(func(f *flag.Flag) { nSet = nSet || f.Name == "n" })
	if (o.maps || o.ruleSearch) && !nSet {
		o.n = 50
	}
	runner := run
	if o.maps {
		runner = runMaps
	}
	if o.ruleSearch {
		runner = runRuleSearch
	}
	if err := runner(o); err != nil {
		fmt.Fprintln(os.Stderr, "evaluate:", err)
		if inputerr.Is(err) {
			os.Exit(2)
		}
		os.Exit(1)
	}
}

func run(o options) error {
	if o.n < 2 || o.perShift < 0 {
		return inputerr.New("", "need -n ≥ 2 and -per-shift ≥ 0, got %d and %d", o.n, o.perShift)
	}
	b, source, err := loadModelFolder(o.model)
	if err != nil {
		return err
	}
	lib, err := ortlib.Find(o.ortLib)
	if err != nil {
		return inputerr.New(o.ortLib, "%v", err)
	}
	if err := inference.InitRuntime(lib); err != nil {
		return err
	}
	// One ONNX Runtime thread per session run: the cohort is parallel by
	// case, o.workers cases at a time.
	sess, err := inference.NewSession(b, inference.SessionOptions{IntraOpThreads: 1})
	if err != nil {
		return err
	}
	defer sess.Close()
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	cfg := study.Config{Seed: o.seed, N: o.n, PerShift: o.perShift, Workers: o.workers, Context: ctx,
		Progress: func(done, total int) {
			if done%20 == 0 || done == total {
				fmt.Fprintf(os.Stderr, "evaluate: %d/%d phantoms scored\n", done, total)
			}
		}}
	var scans []study.RealScan
	if !o.noReal {
		scans = study.ReferenceScans()
	}
	fmt.Fprintf(os.Stderr, "evaluate: %s, seed %d, %d in-distribution + %d per shift, %d real scans, %d CPUs\n",
		source, o.seed, o.n, o.perShift, len(scans), runtime.NumCPU())
	ev, err := study.Run(sess, source, cfg, scans)
	if err != nil {
		return err
	}
	if err := study.WriteOutputs(o.out, b.Card, ev); err != nil {
		return err
	}
	if !o.noReference {
		ref, err := study.CheckWithSklearn(filepath.Join(o.out, study.CasesFile))
		if err != nil {
			return err
		}
		ev.Reference = study.Compare(ev.Figures, ref)
		if err := study.RewriteSummaries(o.out, ev); err != nil {
			return err
		}
	}
	study.WriteTable(os.Stdout, ev)
	if o.doc != "" {
		if err := study.UpdateDocument(o.doc, ev); err != nil {
			return err
		}
		fmt.Fprintf(os.Stderr, "evaluate: figures written into %s\n", o.doc)
	}
	fmt.Fprintf(os.Stderr, "evaluate: wrote %s\n", o.out)
	if ev.Reference != nil && !ev.Reference.OK() {
		return errors.New("the figures disagree with sklearn (see above)")
	}
	return nil
}
