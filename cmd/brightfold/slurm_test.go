package main

import (
	"bytes"
	"context"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"regexp"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"brightfold/internal/cohort"
	"brightfold/internal/refcheck"
)

// slurmCluster is a private single-node Slurm cluster (Debian's Slurm
// 22.05 and munge) living in one temporary folder, started by the test and
// stopped in its cleanup.
type slurmCluster struct {
	dir, conf string
	env       []string
}

// startSlurm starts munged, slurmctld and slurmd on 127.0.0.1 (the recipe
// of shared/NOTES.md) and waits until the node is idle.
func startSlurm(t *testing.T) *slurmCluster {
	t.Helper()
	for _, p := range []string{"/usr/sbin/munged", "/usr/sbin/mungekey", "/usr/sbin/slurmctld", "/usr/sbin/slurmd", "/usr/bin/sbatch", "/usr/bin/sinfo"} {
		refcheck.Path(t, p)
	}
	dir, err := os.MkdirTemp("", "bfslurm")
	if err != nil {
		t.Fatal(err)
	}
	c := &slurmCluster{dir: dir, conf: filepath.Join(dir, "slurm.conf")}
	c.env = append(os.Environ(), "SLURM_CONF="+c.conf)
	t.Cleanup(func() { c.stop(t); os.RemoveAll(dir) })
	m := filepath.Join(dir, "munge")
	for _, d := range []string{m, filepath.Join(dir, "state"), filepath.Join(dir, "spool")} {
		if err := os.MkdirAll(d, 0o755); err != nil {
			t.Fatal(err)
		}
	}
	os.Chmod(dir, 0o755) // munged wants every folder above its socket searchable
	c.run(t, "mungekey", "-c", "-k", filepath.Join(m, "munge.key"))
	c.run(t, "munged", "--socket="+filepath.Join(m, "socket"), "--key-file="+filepath.Join(m, "munge.key"),
		"--pid-file="+filepath.Join(m, "munged.pid"), "--log-file="+filepath.Join(m, "munged.log"),
		"--seed-file="+filepath.Join(m, "seed"))
	host, _ := os.Hostname()
	host, _, _ = strings.Cut(host, ".")
	hw, err := exec.Command("slurmd", "-C").Output()
	if err != nil {
		t.Fatalf("slurmd -C: %v", err)
	}
	line, _, _ := strings.Cut(string(hw), "\n")
	_, hwFields, _ := strings.Cut(line, " ")
	conf := fmt.Sprintf(`ClusterName=brightfoldtest
SlurmctldHost=%[1]s(127.0.0.1)
SlurmctldPort=%[3]d
SlurmdPort=%[4]d
SlurmUser=root
AuthType=auth/munge
AuthInfo=socket=%[2]s/munge/socket
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
DefMemPerCPU=100
SchedulerParameters=batch_sched_delay=0
AccountingStorageType=accounting_storage/none
JobAcctGatherType=jobacct_gather/none
JobCompType=jobcomp/filetxt
JobCompLoc=%[2]s/jobcomp.txt
StateSaveLocation=%[2]s/state
SlurmdSpoolDir=%[2]s/spool
SlurmctldPidFile=%[2]s/slurmctld.pid
SlurmdPidFile=%[2]s/slurmd.pid
SlurmctldLogFile=%[2]s/slurmctld.log
SlurmdLogFile=%[2]s/slurmd.log
NodeName=%[1]s NodeAddr=127.0.0.1 %[5]s
PartitionName=main Nodes=%[1]s Default=YES MaxTime=INFINITE State=UP
`, host, dir, freePort(t), freePort(t), hwFields)
	if err := os.WriteFile(c.conf, []byte(conf), 0o644); err != nil {
		t.Fatal(err)
	}
	c.run(t, "slurmctld", "-f", c.conf)
	c.run(t, "slurmd", "-f", c.conf, "-N", host)
	for deadline := time.Now().Add(20 * time.Second); ; time.Sleep(100 * time.Millisecond) {
		out, _ := c.cmd("sinfo", "-h", "-o", "%t").Output()
		if strings.TrimSpace(string(out)) == "idle" {
			return c
		}
		if time.Now().After(deadline) {
			t.Fatalf("the private Slurm node did not become idle: sinfo says %q", out)
		}
	}
}

func freePort(t *testing.T) int {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port
}

func (c *slurmCluster) cmd(name string, args ...string) *exec.Cmd {
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	_ = cancel // the command ends by itself or at the timeout
	x := exec.CommandContext(ctx, name, args...)
	x.Env = c.env
	return x
}

func (c *slurmCluster) run(t *testing.T, name string, args ...string) string {
	t.Helper()
	out, err := c.cmd(name, args...).CombinedOutput()
	if err != nil {
		t.Fatalf("%s %s: %v\n%s", name, strings.Join(args, " "), err, out)
	}
	return string(out)
}

// stop ends slurmd, slurmctld, any job step left from this cluster (found
// by the SLURM_CONF in its environment) and munged, by their pids.
func (c *slurmCluster) stop(t *testing.T) {
	for _, pf := range []string{"slurmd.pid", "slurmctld.pid"} {
		stopPid(readPid(filepath.Join(c.dir, pf)))
	}
	for _, pid := range c.leftovers() {
		stopPid(pid)
	}
	stopPid(readPid(filepath.Join(c.dir, "munge", "munged.pid")))
}

func readPid(p string) int {
	b, err := os.ReadFile(p)
	if err != nil {
		return 0
	}
	pid, _ := strconv.Atoi(strings.TrimSpace(string(b)))
	return pid
}

// leftovers are the processes whose environment names this cluster's slurm.conf.
func (c *slurmCluster) leftovers() []int {
	ents, _ := os.ReadDir("/proc")
	var pids []int
	for _, e := range ents {
		pid, err := strconv.Atoi(e.Name())
		if err != nil || pid == os.Getpid() {
			continue
		}
		env, err := os.ReadFile(filepath.Join("/proc", e.Name(), "environ"))
		if err == nil && bytes.Contains(env, []byte("SLURM_CONF="+c.conf+"\x00")) {
			pids = append(pids, pid)
		}
	}
	return pids
}

// stopPid sends SIGTERM, waits up to 5 s, then SIGKILL.
func stopPid(pid int) {
	if pid <= 0 {
		return
	}
	syscall.Kill(pid, syscall.SIGTERM)
	for i := 0; i < 50; i++ {
		if syscall.Kill(pid, 0) != nil {
			return
		}
		time.Sleep(100 * time.Millisecond)
	}
	syscall.Kill(pid, syscall.SIGKILL)
}

// jobStates reads the jobcomp file: job id (array tasks as A_a) → state.
func (c *slurmCluster) jobStates() map[string]string {
	b, _ := os.ReadFile(filepath.Join(c.dir, "jobcomp.txt"))
	st := map[string]string{}
	reID := regexp.MustCompile(`\bJobId=(\d+)`)
	reArr := regexp.MustCompile(`\bArrayJobId=(\d+) ArrayTaskId=(\d+)`)
	reState := regexp.MustCompile(`\bJobState=(\S+)`)
	for _, l := range strings.Split(string(b), "\n") {
		id, state := reID.FindStringSubmatch(l), reState.FindStringSubmatch(l)
		if id == nil || state == nil {
			continue
		}
		key := id[1]
		if a := reArr.FindStringSubmatch(l); a != nil && a[1] != "0" {
			key = a[1] + "_" + a[2]
		}
		st[key] = state[1]
	}
	return st
}

// TestSweepOnSlurm submits the script for 4 shards over 12 phantoms to a
// private Slurm cluster, waits for the array and the group job, and checks
// that the merged outputs equal a single-process sweep.
func TestSweepOnSlurm(t *testing.T) {
	lib := refcheck.ORTLib(t)
	t.Setenv("SOURCE_DATE_EPOCH", "1796000000") // same audit.pdf bytes here and in the Slurm group job
	cl := startSlurm(t)
	root := writeSweepBIDS(t, 12, 6)
	ref := filepath.Join(t.TempDir(), "ref")
	for _, level := range []string{"participant", "group"} {
		if code, _, stderr := runCLI("sweep", root, ref, level, "--ort-lib", lib, "--threads", "1"); code != 0 {
			t.Fatalf("single-process %s: exit %d: %s", level, code, stderr)
		}
	}
	out := filepath.Join(t.TempDir(), "out")
	os.MkdirAll(out, 0o755)
	os.Chmod(filepath.Dir(out), 0o755)
	script := filepath.Join(t.TempDir(), "sweep.sh")
	if code, _, stderr := runCLI("sweep", root, out, "--ort-lib", lib, "--slurm-script", script, "--shards", "4",
		"--max-running", "4", "--cpus-per-task", "1", "--mem", "400M", "--time", "00:05:00", "--group-time", "00:05:00"); code != 0 {
		t.Fatalf("--slurm-script: exit %d: %s", code, stderr)
	}
	text, _ := os.ReadFile(script)
	for _, want := range []string{"--array=0-3%4", "--dependency=afterok:${array_id}", "--kill-on-invalid-dep=yes",
		"%x-%A-%a.out", "SLURM_ARRAY_TASK_ID", "--cpus-per-task=1", "--mem=400M", "--time=00:05:00"} {
		if !strings.Contains(string(text), want) {
			t.Errorf("script lacks %q", want)
		}
	}
	sub := cl.cmd("bash", script)
	sub.Env = append(sub.Env, "BRIGHTFOLD_TEST_AS_CLI=1")
	subOut, err := sub.CombinedOutput()
	if err != nil {
		t.Fatalf("bash %s: %v\n%s", script, err, subOut)
	}
	m := regexp.MustCompile(`shard array job: (\d+)[\s\S]*group job: (\d+)`).FindStringSubmatch(string(subOut))
	if m == nil {
		t.Fatalf("job ids not printed:\n%s", subOut)
	}
	array, group := m[1], m[2]
	var st map[string]string
	for deadline := time.Now().Add(90 * time.Second); ; time.Sleep(200 * time.Millisecond) {
		st = cl.jobStates()
		if st[group] != "" {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("the group job did not finish in 90 s; states %v", st)
		}
	}
	for a := 0; a < 4; a++ {
		if s := st[fmt.Sprintf("%s_%d", array, a)]; s != "COMPLETED" && !(a == 0 && st[array] == "COMPLETED") {
			t.Errorf("array task %s_%d: %q", array, a, s)
		}
		if _, err := os.Stat(filepath.Join(out, "logs", fmt.Sprintf("brightfold-sweep-%s-%d.out", array, a))); err != nil {
			t.Errorf("log of task %d: %v", a, err)
		}
	}
	if st[group] != "COMPLETED" {
		log, _ := os.ReadFile(filepath.Join(out, "logs", "brightfold-sweep-group-"+group+".out"))
		t.Fatalf("group job %s: %s\n%s", group, st[group], log)
	}
	got, err := cohort.ReadOutputs(out)
	if err != nil {
		t.Fatal(err)
	}
	for k := range got {
		if strings.HasPrefix(k, "logs"+string(filepath.Separator)) {
			delete(got, k)
		}
	}
	want, _ := cohort.ReadOutputs(ref)
	if !reflect.DeepEqual(got, want) {
		for k := range want {
			if got[k] != want[k] {
				t.Errorf("%s differs between Slurm shards and one process", k)
			}
		}
		for k := range got {
			if _, ok := want[k]; !ok {
				t.Errorf("%s only from Slurm", k)
			}
		}
	}
	t.Logf("Slurm: array %s (4 shards) and group %s completed; %d outputs equal to one process", array, group, len(want))

	// Failing shards (the program replaced by /bin/false) must cancel the
	// group job instead of leaving it pending (--kill-on-invalid-dep=yes).
	fail := cl.cmd("bash", script)
	fail.Env = append(fail.Env, "BRIGHTFOLD=/bin/false")
	failOut, err := fail.CombinedOutput()
	m = regexp.MustCompile(`shard array job: (\d+)[\s\S]*group job: (\d+)`).FindStringSubmatch(string(failOut))
	if err != nil || m == nil {
		t.Fatalf("second submission: %v\n%s", err, failOut)
	}
	for deadline := time.Now().Add(60 * time.Second); ; time.Sleep(200 * time.Millisecond) {
		if s := cl.jobStates()[m[2]]; s != "" {
			if s != "CANCELLED" {
				t.Errorf("group job after failed shards: %s, want CANCELLED", s)
			}
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("group job %s still not ended 60 s after its shards failed", m[2])
		}
	}
}
