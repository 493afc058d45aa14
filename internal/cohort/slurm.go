package cohort

import (
	"flag"
	"fmt"
	"io"
	"strings"

	"brightfold/internal/notice"
)

// SlurmOptions are the resources and settings of a submission script.
type SlurmOptions struct {
	Shards      int    // array tasks, one shard each
	Concurrent  int    // at most this many tasks at once (the %K of --array)
	CPUsPerTask int    // --cpus-per-task
	Mem         string // --mem per task
	Time        string // --time limit per task
	GroupTime   string // --time limit of the group job
	Partition   string // --partition, "" for the cluster's default
	JobName     string // --job-name of the array; the group job adds "-group"
}

// SlurmFlags registers the script's flags with their defaults.
func SlurmFlags(fs *flag.FlagSet, o *SlurmOptions) {
	fs.IntVar(&o.Shards, "shards", 0, "with --slurm-script: number of shards (array tasks)")
	fs.IntVar(&o.Concurrent, "max-running", 8, "with --slurm-script: array tasks running at once (the %K of --array)")
	fs.IntVar(&o.CPUsPerTask, "cpus-per-task", 2, "with --slurm-script: CPUs per array task")
	fs.StringVar(&o.Mem, "mem", "2G", "with --slurm-script: memory per array task")
	fs.StringVar(&o.Time, "time", "04:00:00", "with --slurm-script: time limit per array task")
	fs.StringVar(&o.GroupTime, "group-time", "00:30:00", "with --slurm-script: time limit of the group job")
	fs.StringVar(&o.Partition, "partition", "", "with --slurm-script: partition (default: the cluster's default)")
	fs.StringVar(&o.JobName, "job-name", "brightfold-sweep", "with --slurm-script: job name of the array")
}

// Check refuses unusable settings.
func (o SlurmOptions) Check() error {
	switch {
	case o.Shards < 1:
		return fmt.Errorf("--slurm-script needs --shards N with N >= 1")
	case o.Concurrent < 1 || o.CPUsPerTask < 1:
		return fmt.Errorf("--max-running and --cpus-per-task must be 1 or more")
	case o.Mem == "" || o.Time == "" || o.GroupTime == "" || o.JobName == "":
		return fmt.Errorf("--mem, --time, --group-time and --job-name must not be empty")
	}
	for _, s := range []string{o.Mem, o.Time, o.GroupTime, o.Partition, o.JobName} {
		if strings.ContainsAny(s, " \t\n'\"$`\\;&|<>%") {
			return fmt.Errorf("slurm setting %q: no spaces, quotes or shell characters", s)
		}
	}
	return nil
}

// SlurmJob is what each job runs: the program and the sweep's arguments
// (INPUT, OUTDIR and the flags every level shares).
type SlurmJob struct {
	Program string   // absolute path of brightfold
	Input   string   // absolute
	Out     string   // absolute
	Flags   []string // e.g. --model /abs/model --map lrp --jobs 2
	Jobs    int      // the --jobs of each task; its ONNX Runtime threads are --cpus-per-task / Jobs
}

// slurmTemplate is the submission script; the %[n] verbs are filled by
// WriteSlurmScript.
const slurmTemplate = `#!/bin/bash
# Brightfold sweep on a Slurm cluster: %[1]d shards as a job array, then the
# group level (merge and site audit) once every shard has succeeded.
# %[2]s
# Submit on the cluster's login node with: bash THIS_FILE
# Written by brightfold sweep --slurm-script; it submits jobs, it does not run the sweep itself.
set -euo pipefail
BRIGHTFOLD=${BRIGHTFOLD:-%[3]s}
INPUT=%[4]s
OUTDIR=%[5]s
mkdir -p "$OUTDIR/logs"

array_id=$(sbatch --parsable --job-name=%[6]s --array=0-%[7]d%%%[8]d \
  --cpus-per-task=%[9]d --mem=%[10]s --time=%[11]s%[12]s \
  --output="$OUTDIR/logs/%%x-%%A-%%a.out" <<EOF
#!/bin/bash
set -euo pipefail
exec ${BRIGHTFOLD@Q} sweep ${INPUT@Q} ${OUTDIR@Q} participant --shard "\${SLURM_ARRAY_TASK_ID}/%[1]d" --threads %[15]d %[13]s
EOF
)
array_id=${array_id%%%%;*}

group_id=$(sbatch --parsable --job-name=%[6]s-group --dependency=afterok:${array_id} --kill-on-invalid-dep=yes \
  --cpus-per-task=1 --mem=%[10]s --time=%[14]s%[12]s \
  --output="$OUTDIR/logs/%%x-%%j.out" <<EOF
#!/bin/bash
set -euo pipefail
exec ${BRIGHTFOLD@Q} sweep ${INPUT@Q} ${OUTDIR@Q} group %[13]s
EOF
)
group_id=${group_id%%%%;*}

echo "shard array job: ${array_id} (%[1]d tasks, at most %[8]d at once)"
echo "group job: ${group_id} (starts when every shard has succeeded; cancelled if one fails)"
echo "logs: $OUTDIR/logs"
`

// WriteSlurmScript writes a bash script that, run on a cluster's login
// node, submits a job array (one shard per task, logs %x-%A-%a.out in
// OUTDIR/logs) and the group job depending on it with afterok, killed if a
// shard fails (--kill-on-invalid-dep=yes), and prints both job ids. It runs
// nothing itself.
func WriteSlurmScript(w io.Writer, j SlurmJob, o SlurmOptions) error {
	if err := o.Check(); err != nil {
		return err
	}
	flags := make([]string, len(j.Flags))
	for i, f := range j.Flags {
		flags[i] = heredocQuote(f)
	}
	part := ""
	if o.Partition != "" {
		part = " --partition=" + o.Partition
	}
	threads := max(1, o.CPUsPerTask/max(1, j.Jobs))
	_, err := fmt.Fprintf(w, slurmTemplate, o.Shards, notice.Full, shellQuote(j.Program), shellQuote(j.Input),
		shellQuote(j.Out), o.JobName, o.Shards-1, min(o.Concurrent, o.Shards), o.CPUsPerTask, o.Mem, o.Time,
		part, strings.Join(flags, " "), o.GroupTime, threads)
	return err
}

// heredocQuote quotes s for a line of an unquoted here-document that a
// second shell runs: the here-document drops the backslashes put before
// $, ` and \, and the second shell reads the single quotes.
func heredocQuote(s string) string {
	return strings.NewReplacer(`\`, `\\`, "$", `\$`, "`", "\\`").Replace(shellQuote(s))
}

// shellQuote quotes s for bash with single quotes unless it is plainly safe.
func shellQuote(s string) string {
	if s != "" && strings.IndexFunc(s, func(r rune) bool {
		return !(r == '/' || r == '.' || r == '-' || r == '_' || r == ':' || r == '=' || r == ',' || r == '+' ||
			r >= '0' && r <= '9' || r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z')
	}) < 0 {
		return s
	}
	return "'" + strings.ReplaceAll(s, "'", `'\''`) + "'"
}
