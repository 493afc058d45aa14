package cohort

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// TestSlurmScriptQuoting runs the script with a stand-in sbatch (which
// saves each job script it is given) and then runs the saved job scripts
// with a stand-in brightfold that prints its arguments: paths with spaces,
// quotes and $ must arrive unchanged, the array task id must be expanded at
// run time, and the group job must depend on the array job's id.
func TestSlurmScriptQuoting(t *testing.T) {
	bash, err := exec.LookPath("bash")
	if err != nil {
		t.Skip("no bash")
	}
	dir := t.TempDir()
	bin := filepath.Join(dir, "bin")
	must(t, os.MkdirAll(bin, 0o755))
	// sbatch stand-in: job scripts to job-N.sh, arguments to args-N, prints N
	must(t, os.WriteFile(filepath.Join(bin, "sbatch"), []byte(`#!/bin/bash
n=$(( $(ls "$JOBS" | grep -c '^job-') + 100 ))
cat > "$JOBS/job-$n.sh"
printf '%s\n' "$@" > "$JOBS/args-$n"
echo "$n;cluster"
`), 0o755))
	prog := filepath.Join(dir, "my brightfold's $HOME")
	must(t, os.WriteFile(prog, []byte("#!/bin/bash\nprintf '<%s>' \"$@\"\n"), 0o755))
	in, out := filepath.Join(dir, "in put"), filepath.Join(dir, `out "dir"`)
	var buf bytes.Buffer
	j := SlurmJob{Program: prog, Input: in, Out: out, Flags: []string{"--model", filepath.Join(dir, "m$x 'y'"), "--jobs", "2"}, Jobs: 2}
	o := SlurmOptions{Shards: 3, Concurrent: 8, CPUsPerTask: 4, Mem: "1G", Time: "01:00:00", GroupTime: "00:10:00", JobName: "bf"}
	must(t, WriteSlurmScript(&buf, j, o))
	script := filepath.Join(dir, "sweep.sh")
	must(t, os.WriteFile(script, buf.Bytes(), 0o644))
	cmd := exec.Command(bash, script)
	cmd.Env = append(os.Environ(), "PATH="+bin+":"+os.Getenv("PATH"), "JOBS="+bin)
	got, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("script: %v\n%s", err, got)
	}
	if !strings.Contains(string(got), "shard array job: 100 (3 tasks, at most 3 at once)") || !strings.Contains(string(got), "group job: 101") {
		t.Errorf("script output:\n%s", got)
	}
	args, _ := os.ReadFile(filepath.Join(bin, "args-100"))
	gargs, _ := os.ReadFile(filepath.Join(bin, "args-101"))
	if !strings.Contains(string(args), "--array=0-2%3") || !strings.Contains(string(gargs), "--dependency=afterok:100") || !strings.Contains(string(gargs), "--kill-on-invalid-dep=yes") {
		t.Errorf("sbatch arguments:\n%s\n%s", args, gargs)
	}
	run := func(job string, env ...string) string {
		c := exec.Command(bash, filepath.Join(bin, job))
		c.Env = append(os.Environ(), env...)
		b, err := c.CombinedOutput()
		if err != nil {
			t.Fatalf("%s: %v\n%s", job, err, b)
		}
		return string(b)
	}
	model := "<--model><" + filepath.Join(dir, "m$x 'y'") + ">"
	want := "<sweep><" + in + "><" + out + "><participant><--shard><2/3><--threads><2>" + model + "<--jobs><2>"
	if g := run("job-100.sh", "SLURM_ARRAY_TASK_ID=2"); g != want {
		t.Errorf("array task runs\n%s\nwant\n%s", g, want)
	}
	want = "<sweep><" + in + "><" + out + "><group>" + model + "<--jobs><2>"
	if g := run("job-101.sh"); g != want {
		t.Errorf("group job runs\n%s\nwant\n%s", g, want)
	}
}
