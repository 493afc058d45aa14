package main

import (
	"flag"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"

	"brightfold/internal/atomicfile"
	"brightfold/internal/notice"
	"brightfold/internal/reading"
)

const sessionUsage = "session new|record|export ...   reading sessions (unaided, then aided reads)"

const (
	sessionNewUsage    = "session new --cases CASES --reader NAME --out FILE [--design sequential|crossover] [--seed S] [--washout-days D]"
	sessionRecordUsage = "session record FILE --case CODE --phase unaided|aided --rating R [--confidence C] [--note TEXT] [--amend] [--seconds S]"
	sessionExportUsage = "session export FILE [--out reads.csv]"
)

// quietFlags is newFlags whose parse errors come back as one line (through
// parseFlags) without the flag list; helpRequested prints help when asked.
func quietFlags(e *env, name string) *flag.FlagSet {
	fs := newFlags(e, name)
	fs.SetOutput(io.Discard)
	fs.Usage = func() {}
	return fs
}

// helpRequested prints the usage, the flags and the notice when args ask for help.
func helpRequested(e *env, fs *flag.FlagSet, args []string, usage string, more ...string) bool {
	for _, a := range args {
		if a == "-h" || a == "-help" || a == "--help" {
			fmt.Fprintln(e.stdout, "usage: brightfold "+usage)
			for _, m := range more {
				fmt.Fprintln(e.stdout, m)
			}
			fs.SetOutput(e.stdout)
			fs.PrintDefaults()
			fmt.Fprintln(e.stdout, notice.Full)
			return true
		}
	}
	return false
}

// runSession dispatches `brightfold session new|record|export`.
func runSession(e *env, args []string) error {
	if len(args) > 0 {
		switch args[0] {
		case "new":
			return runSessionNew(e, args[1:])
		case "record":
			return runSessionRecord(e, args[1:])
		case "export":
			return runSessionExport(e, args[1:])
		}
	}
	if len(args) > 0 && (args[0] == "-h" || args[0] == "--help" || args[0] == "help") {
		fmt.Fprintf(e.stdout, "usage:\n  brightfold %s\n  brightfold %s\n  brightfold %s\n%s\n", sessionNewUsage, sessionRecordUsage, sessionExportUsage, notice.Full)
		return nil
	}
	return usageError("usage: brightfold %s | %s | %s", sessionNewUsage, sessionRecordUsage, sessionExportUsage)
}

func runSessionNew(e *env, args []string) error {
	fs := quietFlags(e, "session new")
	cases := fs.String("cases", "", "case list: a demo cohort folder, a CSV manifest, a BIDS folder or a DICOM folder tree")
	reader := fs.String("reader", "", "the reader's name or code (exported with the reads)")
	out := fs.String("out", "", "the new session file")
	design := fs.String("design", string(reading.Sequential), "sequential (unaided read locked before the aided) or crossover (two sittings)")
	seed := fs.String("seed", "", "seed of the case order (default: from the clock, recorded in the session)")
	washout := fs.Int("washout-days", reading.DefaultWashoutDays, "crossover: least days between the two sittings before a warning")
	if helpRequested(e, fs, args, sessionNewUsage) {
		return nil
	}
	pos, err := parseFlags(fs, args)
	if err != nil {
		return err
	}
	if len(pos) != 0 || *cases == "" || *reader == "" || *out == "" {
		return usageError("usage: brightfold %s", sessionNewUsage)
	}
	s := uint64(time.Now().UnixNano())
	if *seed != "" {
		if s, err = strconv.ParseUint(*seed, 10, 64); err != nil {
			return usageError("--seed %q is not an unsigned integer", *seed)
		}
	}
	if *washout < 1 {
		return usageError("--washout-days %d: want at least 1", *washout)
	}
	list, err := reading.LoadCases(*cases)
	if err != nil {
		return err
	}
	sess, err := reading.Create(*out, list, reading.Options{Reader: *reader, Design: reading.Design(*design),
		Seed: s, WashoutDays: *washout})
	if err != nil {
		return err
	}
	defer sess.Close()
	fmt.Fprintf(e.stdout, "%s: %s session of %d cases for reader %s (seed %d)\n%s\n",
		*out, sess.Meta.Design, len(list), *reader, s, notice.Full)
	return nil
}

func runSessionRecord(e *env, args []string) error {
	fs := quietFlags(e, "session record")
	code := fs.String("case", "", "case code (as shown in the worklist, e.g. C007)")
	phase := fs.String("phase", "", "unaided or aided")
	rating := fs.Float64("rating", -1, "your probability that the pattern is present, 0-100")
	confidence := fs.Int("confidence", 0, "optional confidence, 1-5")
	note := fs.String("note", "", "optional note")
	amend := fs.Bool("amend", false, "record a dated amendment of a locked read")
	seconds := fs.Float64("seconds", -1, "optional time spent on the case before locking, in seconds")
	if helpRequested(e, fs, args, sessionRecordUsage) {
		return nil
	}
	pos, err := parseFlags(fs, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 || *code == "" || *phase == "" {
		return usageError("usage: brightfold %s", sessionRecordUsage)
	}
	sess, err := reading.Open(pos[0])
	if err != nil {
		return err
	}
	defer sess.Close()
	now := time.Now()
	r := reading.Read{Code: strings.ToUpper(*code), Phase: reading.Phase(*phase), Rating: *rating,
		Confidence: *confidence, Note: *note, Amend: *amend, Locked: now}
	if *seconds >= 0 {
		r.Opened = now.Add(-time.Duration(*seconds * float64(time.Second)))
	}
	res, err := sess.Record(r)
	if err != nil {
		return err
	}
	if res.Warning != "" {
		fmt.Fprintf(e.stderr, "brightfold: warning: %s: %s\n", pos[0], res.Warning)
	}
	fmt.Fprintf(e.stdout, "%s: %s read of %s locked (read %d)\n", pos[0], r.Phase, r.Code, res.ID)
	return nil
}

func runSessionExport(e *env, args []string) error {
	fs := quietFlags(e, "session export")
	out := fs.String("out", "", "CSV file to write (default: standard output)")
	if helpRequested(e, fs, args, sessionExportUsage) {
		return nil
	}
	pos, err := parseFlags(fs, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usageError("usage: brightfold %s", sessionExportUsage)
	}
	sess, err := reading.Open(pos[0])
	if err != nil {
		return err
	}
	defer sess.Close()
	if *out == "" {
		return sess.Export(e.stdout)
	}
	return atomicfile.Write(*out, func(w io.Writer) error { return sess.Export(w) })
}
