package main

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"os/signal"
	"path/filepath"

	"brightfold/inference"
	"brightfold/internal/atomicfile"
	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
	"brightfold/internal/ortlib"
	"brightfold/internal/study"
)

// MapsFile is the relevance-map evaluation's JSON output.
const MapsFile = "maps.json"

// runMaps is `evaluate -maps`: the relevance-map localisation and input
// share table (package study) on pattern-positive phantoms; it writes
// maps.json and maps.md into -out and refreshes the maps block of -doc.
func runMaps(o options) error {
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
	sess, err := inference.NewSession(b, inference.SessionOptions{IntraOpThreads: 1})
	if err != nil {
		return err
	}
	defer sess.Close()
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	seed := o.seed
	if seed == study.DefaultSeed {
		seed = study.MapsSeed
	}
	cfg := study.MapsConfig{Seed: seed, Cases: o.n, Workers: o.workers, Context: ctx,
		Progress: func(done, total int) {
			fmt.Fprintf(os.Stderr, "evaluate: relevance maps of %d/%d phantoms\n", done, total)
		}}
	fmt.Fprintf(os.Stderr, "evaluate: relevance maps, %s, seed %d, %d pattern-positive phantoms\n", source, seed, o.n)
	r, err := study.RunMaps(b, sess, cfg)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(o.out, 0o755); err != nil {
		return inputerr.Wrap(o.out, err)
	}
	js, err := json.MarshalIndent(struct {
		*study.MapsResult
		Notice string `json:"notice"`
	}{r, notice.Full}, "", "  ")
	if err != nil {
		return err
	}
	if err := atomicfile.WriteBytes(filepath.Join(o.out, MapsFile), js); err != nil {
		return err
	}
	study.WriteMapsMarkdown(os.Stdout, r)
	if o.doc != "" {
		if err := study.UpdateMapsDocument(o.doc, r); err != nil {
			return err
		}
		fmt.Fprintf(os.Stderr, "evaluate: relevance-map figures written into %s\n", o.doc)
	}
	return nil
}

// runRuleSearch is `evaluate -rule-search`: every LRP composite candidate
// on the search seed's pattern-positive phantoms (the choice of the
// default); prints the table and refreshes its block of -doc.
func runRuleSearch(o options) error {
	b, source, err := loadModelFolder(o.model)
	if err != nil {
		return err
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	seed := o.seed
	if seed == study.DefaultSeed {
		seed = study.RuleSearchSeed
	}
	fmt.Fprintf(os.Stderr, "evaluate: LRP rule search, %s, seed %d, %d pattern-positive phantoms\n", source, seed, o.n)
	r, err := study.RunRuleSearch(b, study.MapsConfig{Seed: seed, Cases: o.n, Workers: o.workers, Context: ctx,
		Progress: func(done, total int) { fmt.Fprintf(os.Stderr, "evaluate: rule search, %d/%d phantoms\n", done, total) }})
	if err != nil {
		return err
	}
	study.WriteRuleSearchMarkdown(os.Stdout, r)
	if o.doc != "" {
		if err := study.UpdateRuleSearchDocument(o.doc, r); err != nil {
			return err
		}
		fmt.Fprintf(os.Stderr, "evaluate: rule-search figures written into %s\n", o.doc)
	}
	return nil
}
