// Command brightfold is the Brightfold desktop viewer and its headless
// command line: inspect scans, score them with a model folder, make the
// synthetic demo cohort, and check model folders. Research use only.
package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"runtime/debug"
	"strings"

	"brightfold/internal/inputerr"
	_ "brightfold/internal/langenv"
	"brightfold/internal/notice"
)

// command is one sub-command: run parses its own flags from args.
type command struct {
	name, usage string
	run         func(env *env, args []string) error
}

// env carries the process's streams so that commands are testable.
type env struct {
	stdout, stderr io.Writer
}

func commands() []command {
	return []command{
		{"view", "view [PATH...]          desktop viewer on scans or folders (default: the demo cohort)", runView},
		{"inspect", "inspect PATH [--json]   header, geometry, series summary", runInspect},
		{"score", "score PATH [--model MODEL] [--map lrp|ig|gradinput|occlusion|none] [--out DIR] [--json]", runScore},
		{"demo", "demo cohort DIR [--n N] [--seed S] [--shifts]", runDemo},
		{"model", "model check|make|show|recalibrate ...  model folders (brightfold model make --help)", runModelFolder},
		{"prepare", "prepare SCAN (--model MODEL | --spec SPEC.json) --out FILE.nii.gz | --print-spec   what the model sees", runPrepare},
		{"align", "align SCAN --to TEMPLATE [--dof 6|12] [--metric ncc|mi] [--mask FILE] [--out DIR] [--json]", runAlign},
		{"sweep", sweepUsage, runSweep},
		{"session", sessionUsage, runSession},
		{"mrmc", mrmcUsage + "   reader-study analysis: AUROC per reader, DeLong or Obuchowski–Rockette test", runMRMC},
		{"version", "version                 program version", runVersion},
	}
}

func main() {
	os.Exit(run(os.Args[1:], &env{stdout: os.Stdout, stderr: os.Stderr}))
}

// run dispatches a sub-command and maps its error to an exit code:
// 0 done, 2 bad input or usage, 1 internal failure.
func run(args []string, e *env) (code int) {
	defer func() {
		if r := recover(); r != nil {
			fmt.Fprintf(e.stderr, "brightfold: internal error: %v\n", r)
			if os.Getenv("BRIGHTFOLD_DEBUG") != "" {
				e.stderr.Write(debug.Stack())
			}
			code = 1
		}
	}()
	setMemoryLimit()
	if len(args) == 0 {
		args = []string{"view"}
	}
	name := args[0]
	if name == "-h" || name == "--help" || name == "help" {
		printUsage(e.stdout)
		return 0
	}
	for _, c := range commands() {
		if c.name == name {
			return exitCode(e, c.run(e, args[1:]))
		}
	}
	fmt.Fprintf(e.stderr, "brightfold: unknown command %s; try 'brightfold --help'\n", quoteName(name))
	return 2
}

func exitCode(e *env, err error) int {
	switch {
	case err == nil:
		return 0
	case errors.Is(err, flag.ErrHelp):
		return 0
	case inputerr.Is(err):
		line := errorLine(err)
		if !strings.HasPrefix(line, "brightfold ") {
			line = "brightfold: " + line
		}
		fmt.Fprintln(e.stderr, line)
		return 2
	default:
		fmt.Fprintf(e.stderr, "brightfold: internal error: %s\n", errorLine(err))
		return 1
	}
}

func printUsage(w io.Writer) {
	fmt.Fprintln(w, notice.Full)
	fmt.Fprintln(w, "\nUsage (brightfold COMMAND --help lists a command's options):")
	printCommandTable(w, commands())
	fmt.Fprintln(w, "\nExit codes: 0 done, 2 bad input or usage, 1 internal failure.")
}

// usageError is an input error for a command-line mistake.
func usageError(format string, args ...any) error {
	return inputerr.New("", format, args...)
}

// newFlags makes a flag set that reports errors instead of exiting; its
// output (help) is standard output.
func newFlags(e *env, name string) *flag.FlagSet {
	fs := flag.NewFlagSet("brightfold "+name, flag.ContinueOnError)
	fs.SetOutput(e.stdout)
	fs.Usage = commandHelp(fs, name+" [OPTIONS]")
	return fs
}

// parseFlags parses args, allowing flags after positional arguments, and
// turns flag errors into one-line usage errors; -h or --help prints the
// command's help (fs.Usage) on its output and gives flag.ErrHelp (exit 0).
func parseFlags(fs *flag.FlagSet, args []string) ([]string, error) {
	var pos []string
	usage, out := fs.Usage, fs.Output()
	defer func() { fs.Usage = usage; fs.SetOutput(out) }()
	for {
		fs.Usage = func() {}
		fs.SetOutput(io.Discard)
		if err := fs.Parse(args); err != nil {
			if errors.Is(err, flag.ErrHelp) {
				fs.SetOutput(out)
				usage()
				return nil, err
			}
			return nil, flagError(fs, err)
		}
		args = fs.Args()
		if len(args) == 0 {
			return pos, nil
		}
		pos = append(pos, args[0])
		args = args[1:]
	}
}
