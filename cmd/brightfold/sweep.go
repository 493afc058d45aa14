package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"strconv"
	"strings"
	"syscall"

	"brightfold/inference"
	"brightfold/internal/atomicfile"
	"brightfold/internal/cohort"
	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
)

// sweepOptions are the flags of `brightfold sweep`.
type sweepOptions struct {
	model, mapMethod, shard, ortLib, covariates, ageBands string
	labels                                                stringList
	jobs, threads                                         int
	slurm                                                 cohort.SlurmOptions
	slurmScript                                           string
}

// stringList is a repeatable string flag.
type stringList []string

func (l *stringList) String() string { return strings.Join(*l, " ") }

// Set adds one value (or several separated by spaces or commas).
func (l *stringList) Set(s string) error {
	*l = append(*l, strings.FieldsFunc(s, func(r rune) bool { return r == ',' || r == ' ' })...)
	return nil
}

const sweepUsage = "sweep INPUT OUTDIR [participant|group] [--participant-label L ...] [--model MODEL] [--map METHOD] [--jobs N] [--shard I/N] [--slurm-script FILE --shards N]"

// runSweep scores a cohort (participant level) or merges and audits it
// (group level), BIDS Apps style, or writes a Slurm submission script.
func runSweep(e *env, args []string) error {
	fs := newFlags(e, "sweep")
	var o sweepOptions
	fs.Var(&o.labels, "participant-label", "participant labels to process, without sub- (repeatable; default: all)")
	fs.StringVar(&o.model, "model", "", "model folder (default: the embedded demo model folder)")
	fs.StringVar(&o.mapMethod, "map", "none", "relevance map per case: "+strings.Join(relevanceMethods, "|"))
	fs.IntVar(&o.jobs, "jobs", 1, "cases scored at a time in this process (one shared model session)")
	fs.StringVar(&o.shard, "shard", "", "score only shard I of N (I/N, 0-based; partition by participant)")
	fs.StringVar(&o.ortLib, "ort-lib", "", "path of the ONNX Runtime library")
	fs.IntVar(&o.threads, "threads", 0, "ONNX Runtime intra-op threads (default: cores / jobs)")
	fs.StringVar(&o.covariates, "covariates", "", "group: participants.tsv-style table of covariates (default: the input's own)")
	fs.StringVar(&o.ageBands, "age-bands", "", "group: age band edges in years, e.g. 40,60,80 (default: decades)")
	fs.StringVar(&o.slurmScript, "slurm-script", "", "write a Slurm submission script to FILE and run nothing")
	cohort.SlurmFlags(fs, &o.slurm)
	fs.Usage = func() {
		fmt.Fprintln(e.stderr, "usage: brightfold "+sweepUsage)
		fs.PrintDefaults()
	}
	pos, err := parseFlags(fs, args)
	if err != nil {
		return err
	}
	if len(pos) < 2 || len(pos) > 3 {
		return usageError("brightfold %s", sweepUsage)
	}
	level := "participant"
	if len(pos) == 3 {
		level = pos[2]
	}
	if level != "participant" && level != "group" {
		return usageError("brightfold sweep: analysis level %q: want participant or group", level)
	}
	if _, err := cohort.ParseAgeBands(o.ageBands); err != nil {
		return usageError("brightfold sweep: %v", err)
	}
	if o.jobs < 1 || o.threads < 0 {
		return usageError("brightfold sweep: --jobs must be 1 or more and --threads 0 or more")
	}
	if o.slurmScript != "" {
		return writeSlurmScript(e, pos[0], pos[1], o)
	}
	d, err := cohort.Open(pos[0], o.covariates)
	if err != nil {
		return err
	}
	if err := d.Select(o.labels); err != nil {
		return err
	}
	mf, err := openModelFolder(o.model)
	if err != nil {
		return err
	}
	if level == "group" {
		return sweepGroup(e, d, pos[1], mf, o)
	}
	return sweepParticipant(e, d, pos[1], mf, o)
}

func sweepParticipant(e *env, d *cohort.Dataset, out string, mf *inference.ModelFolder, o sweepOptions) error {
	shard := cohort.All
	if o.shard != "" {
		s, err := cohort.ParseShard(o.shard)
		if err != nil {
			return usageError("brightfold sweep: %v", err)
		}
		shard = s
	}
	threads := o.threads
	if threads == 0 {
		threads = max(1, runtime.NumCPU()/o.jobs)
	}
	sess, err := openSession(mf, o.ortLib, threads)
	if err != nil {
		return err
	}
	defer sess.Close()
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	fmt.Fprintln(e.stderr, notice.Full)
	sum, err := cohort.Sweep(ctx, d, out, cohort.Options{Model: mf, Session: sess, Map: o.mapMethod, Jobs: o.jobs,
		Shard: shard, Progress: e.stderr, Terminal: cohort.IsTerminal(e.stderr), By: generator(mf)})
	if errors.Is(err, context.Canceled) {
		return inputerr.New(out, "stopped after %d of %d cases; run the same command again to continue", sum.Skipped+sum.Scored+sum.NotScored, sum.Cases)
	}
	if err != nil {
		return err
	}
	what := "sweep"
	if shard.Count > 1 {
		what = "sweep shard " + shard.String()
	}
	fmt.Fprintf(e.stdout, "%s: %d cases (%d scored, %d not scored, %d already done) in %s\n",
		what, sum.Cases, sum.Scored, sum.NotScored, sum.Skipped, out)
	if shard.Count > 1 {
		return nil
	}
	recs, err := cohort.Collect(d, out, mf.SHA256, o.mapMethod)
	if err != nil {
		return err
	}
	return cohort.WriteScores(out, recs, d.Covariates)
}

func sweepGroup(e *env, d *cohort.Dataset, out string, mf *inference.ModelFolder, o sweepOptions) error {
	recs, err := cohort.Collect(d, out, mf.SHA256, o.mapMethod)
	if err != nil {
		return err
	}
	if err := cohort.WriteScores(out, recs, d.Covariates); err != nil {
		return err
	}
	fmt.Fprintf(e.stdout, "group: %d cases merged into %s\n", len(recs), filepath.Join(out, cohort.ScoresTable))
	bands, err := cohort.ParseAgeBands(o.ageBands)
	if err != nil {
		return usageError("brightfold sweep: %v", err)
	}
	a, err := cohort.RunAudit(recs, cohort.AuditOptions{AgeBands: bands, Seed: 1})
	if err != nil {
		fmt.Fprintf(e.stderr, "brightfold sweep: no site audit: %v\n", err)
		return nil
	}
	if err := cohort.WriteAudit(out, a); err != nil {
		return wrapPathError(out, err)
	}
	fmt.Fprintf(e.stdout, "site audit: %s, %s, %s\n%s\n%s\n", cohort.AuditJSON, cohort.AuditTSV, cohort.AuditPDF, a.Discrimination, a.Calibration.Sentence)
	if a.Covariates != nil {
		fmt.Fprintln(e.stdout, a.Covariates.Sentence)
	}
	for _, p := range a.Partial {
		fmt.Fprintln(e.stdout, p.Sentence)
	}
	fmt.Fprintln(e.stdout, notice.Full)
	return nil
}

// generator names this program and the model folder for GeneratedBy.
func generator(mf *inference.ModelFolder) cohort.Generator {
	v := "(devel)"
	if bi, ok := debug.ReadBuildInfo(); ok && bi.Main.Version != "" {
		v = bi.Main.Version
	}
	return cohort.Generator{Name: "brightfold", Version: v,
		Description: fmt.Sprintf("sweep with the model folder %s %s (model.onnx sha256 %s)", mf.Card.Name, mf.Card.Version, mf.SHA256)}
}

// writeSlurmScript writes the submission script for --shards shards of the
// same sweep; it runs nothing.
func writeSlurmScript(e *env, input, out string, o sweepOptions) error {
	if err := o.slurm.Check(); err != nil {
		return usageError("brightfold sweep: %v", err)
	}
	if o.shard != "" {
		return usageError("brightfold sweep: --shard and --slurm-script do not go together (the script gives each task its shard)")
	}
	prog, err := os.Executable()
	if err != nil {
		return fmt.Errorf("find this program: %w", err)
	}
	j := cohort.SlurmJob{Program: prog, Jobs: o.jobs}
	for _, p := range []struct {
		dst *string
		src string
	}{{&j.Input, input}, {&j.Out, out}} {
		if *p.dst, err = filepath.Abs(p.src); err != nil {
			return inputerr.Wrap(p.src, err)
		}
	}
	add := func(name, value string, path bool) {
		if value == "" {
			return
		}
		if path {
			if abs, err := filepath.Abs(value); err == nil {
				value = abs
			}
		}
		j.Flags = append(j.Flags, "--"+name, value)
	}
	add("model", o.model, true)
	add("map", o.mapMethod, false)
	add("jobs", strconv.Itoa(o.jobs), false)
	add("ort-lib", o.ortLib, true)
	add("covariates", o.covariates, true)
	add("age-bands", o.ageBands, false)
	for _, l := range o.labels {
		add("participant-label", l, false)
	}
	err = atomicfile.Write(o.slurmScript, func(w io.Writer) error { return cohort.WriteSlurmScript(w, j, o.slurm) })
	if err != nil {
		return inputerr.Wrap(o.slurmScript, err)
	}
	fmt.Fprintf(e.stdout, "wrote %s: submit it on the cluster's login node with: bash %s\n", o.slurmScript, o.slurmScript)
	return nil
}
