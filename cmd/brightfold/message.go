package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"runtime/debug"
	"strconv"
	"strings"
	"unicode"

	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
)

// maxShown bounds a path (or any long word) in a message: longer ones keep
// their start and end around "…", so a deep folder cannot give a 4 KB line.
const maxShown = 120

// maxLine bounds a whole error line.
const maxLine = 600

// errorLine is err as one safe line for the terminal: the input it names
// quoted (so a newline or an escape code in a file name is shown as \n or
// \x1b, never acted on), control characters escaped, long paths shortened,
// and no second "brightfold" prefix.
func errorLine(err error) string {
	var ie *inputerr.Error
	msg := err.Error()
	if errors.As(err, &ie) && err == error(ie) && ie.Path != "" {
		msg = quoteName(ie.Path) + ": " + ie.Err.Error()
	} else if errors.As(err, &ie) && err == error(ie) && ie.Path == "" {
		msg = ie.Err.Error()
	}
	msg = shortenWords(escapeControls(msg))
	msg = strings.TrimPrefix(msg, "brightfold: ")
	if len(msg) > maxLine {
		msg = msg[:maxLine] + "…"
	}
	return msg
}

// quoteName quotes a file name for a message, shortened when very long.
func quoteName(p string) string {
	q := strconv.Quote(p)
	if len(q) > maxShown {
		q = q[:maxShown/3] + "…" + q[len(q)-maxShown/2:]
	}
	return q
}

// escapeControls writes control characters (line breaks, escape codes) as
// Go escapes, so that a message stays one line and inert.
func escapeControls(s string) string {
	if strings.IndexFunc(s, unicode.IsControl) < 0 {
		return s
	}
	var b strings.Builder
	for _, r := range s {
		if unicode.IsControl(r) {
			q := strconv.QuoteRune(r)
			b.WriteString(q[1 : len(q)-1])
			continue
		}
		b.WriteRune(r)
	}
	return b.String()
}

// shortenWords shortens each space-separated word longer than maxShown.
func shortenWords(s string) string {
	words := strings.Split(s, " ")
	for i, w := range words {
		if len(w) > maxShown {
			words[i] = w[:maxShown/3] + "…" + w[len(w)-maxShown/2:]
		}
	}
	return strings.Join(words, " ")
}

// flagError is a command-line mistake: one line and where to find help.
func flagError(fs *flag.FlagSet, err error) error {
	msg := strings.Replace(err.Error(), "flag provided but not defined: ", "unknown option ", 1)
	return usageError("%s: %s; try '%s --help'", fs.Name(), msg, fs.Name())
}

// printFlags writes a command's options in aligned columns: "--name VALUE"
// and the description, with the default when it is not the zero value.
func printFlags(w io.Writer, fs *flag.FlagSet) {
	type row struct{ left, right string }
	var rows []row
	width := 0
	fs.VisitAll(func(f *flag.Flag) {
		value, usage := flag.UnquoteUsage(f)
		left := "--" + f.Name
		if value != "" {
			left += " " + strings.ToUpper(value)
		}
		if d := f.DefValue; d != "" && d != "0" && d != "false" {
			usage += fmt.Sprintf(" (default %s)", d)
		}
		rows = append(rows, row{left, usage})
		width = max(width, len(left))
	})
	for _, r := range rows {
		fmt.Fprintf(w, "  %-*s  %s\n", width, r.left, r.right)
	}
}

// commandHelp is a Usage function: the usage line, the options in columns
// and the notice, on the flag set's output (standard output for --help).
func commandHelp(fs *flag.FlagSet, usage string) func() {
	return func() {
		w := fs.Output()
		fmt.Fprintln(w, "usage: brightfold "+usage)
		printFlags(w, fs)
		fmt.Fprintln(w, notice.Full)
	}
}

// runVersion prints the program's version (from the build information).
func runVersion(e *env, args []string) error {
	fs := newFlags(e, "version")
	fs.Usage = commandHelp(fs, "version")
	if _, err := parseFlags(fs, args); err != nil {
		return err
	}
	fmt.Fprintf(e.stdout, "brightfold %s\n%s\n", buildVersion(), notice.Full)
	return nil
}

// buildVersion is the module version, or the VCS revision of a development
// build ("devel" when neither is known).
func buildVersion() string {
	bi, ok := debug.ReadBuildInfo()
	if !ok {
		return "devel"
	}
	v := bi.Main.Version
	rev, dirty := "", false
	for _, s := range bi.Settings {
		switch s.Key {
		case "vcs.revision":
			rev = s.Value
		case "vcs.modified":
			dirty = s.Value == "true"
		}
	}
	if v == "" || v == "(devel)" {
		v = "devel"
		if rev != "" {
			v += " " + rev[:min(12, len(rev))]
		}
		if dirty {
			v += " (modified)"
		}
	}
	return v + " (" + bi.GoVersion + ")"
}

// commandAbout describes the commands whose usage text has no description.
var commandAbout = map[string]string{
	"score": "prediction, calibrated probability and fit check of one scan",
	"demo":  "make the synthetic demo cohort",
	"model": "check a model folder (card, graph, one trial run)",
	"align": "register a scan to a template",
	"sweep": "score every scan of a cohort, locally or on Slurm",
}

// printCommandTable lists the commands in two aligned columns: synopsis and
// description (a synopsis too long for the column puts its description on
// the next line).
func printCommandTable(w io.Writer, cmds []command) {
	const col = 34
	fmt.Fprintf(w, "  %-*s  %s\n", col, "brightfold", "desktop viewer on the demo cohort")
	for _, c := range cmds {
		synopsis, about := c.usage, commandAbout[c.name]
		if i := strings.Index(c.usage, "  "); i >= 0 {
			synopsis, about = c.usage[:i], strings.TrimSpace(c.usage[i:])
		}
		synopsis = "brightfold " + synopsis
		if len(synopsis) > col {
			fmt.Fprintf(w, "  %s\n  %-*s  %s\n", synopsis, col, "", about)
			continue
		}
		fmt.Fprintf(w, "  %-*s  %s\n", col, synopsis, about)
	}
}

// isHelpArg reports whether a is one of the help options.
func isHelpArg(a string) bool { return a == "-h" || a == "-help" || a == "--help" || a == "help" }
