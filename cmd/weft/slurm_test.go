package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"weft/checkpoint"
	"weft/checkpoint/runs"
	"weft/checkpoint/runs/sweep"
)

// The Slurm integration test starts a one-node Slurm cluster on localhost
// from Debian's packages (slurmctld, slurmd, slurm-client, munge), with
// every file in a temporary folder and no systemd, submits the README's
// batch script as a 3-task job array of 'weft sweep run', kills one task's
// weft and requeues it, has another save on SIGUSR1 and requeue itself as
// the script does, then checks 'weft sweep status' and 'weft sweep
// compare'. The daemons are stopped by their process ids whatever the
// outcome. 'make test' installs the packages when run as root; under CI
// (CI=true) a missing piece is a failure, elsewhere a skip with the reason.

// slurmCommands are the programs the test needs, by Debian package.
var slurmCommands = map[string][]string{
	"slurmctld":    {"slurmctld"},
	"slurmd":       {"slurmd"},
	"slurm-client": {"sbatch", "squeue", "scontrol", "scancel", "sinfo"},
	"munge":        {"munged", "mungekey"},
}

// slurmMissing says what keeps the test from running here, or "".
func slurmMissing() string {
	var pkgs, cmds []string
	for _, pkg := range []string{"slurmctld", "slurmd", "slurm-client", "munge"} {
		for _, c := range slurmCommands[pkg] {
			if _, err := exec.LookPath(c); err != nil {
				cmds = append(cmds, c)
				if len(pkgs) == 0 || pkgs[len(pkgs)-1] != pkg {
					pkgs = append(pkgs, pkg)
				}
			}
		}
	}
	var why []string
	if len(cmds) > 0 {
		why = append(why, fmt.Sprintf("missing %s (Debian packages: %s; 'make test' as root installs them)", strings.Join(cmds, ", "), strings.Join(pkgs, " ")))
	}
	if os.Geteuid() != 0 {
		why = append(why, "not root (slurmd runs jobs as the submitting user and the test's cluster runs everything as root)")
	}
	return strings.Join(why, "; ")
}

// slurmCluster is a running one-node cluster.
type slurmCluster struct {
	t        *testing.T
	dir      string // the work folder, 0755 (munged wants o+x above its socket)
	conf     string // slurm.conf; SLURM_CONF for the client commands
	ctld, sd *exec.Cmd
	mungePID int
}

// env is the environment for Slurm's client commands.
func (c *slurmCluster) env(more ...string) []string {
	return append(append(os.Environ(), "SLURM_CONF="+c.conf), more...)
}

// cmd runs a client command and returns its standard output.
func (c *slurmCluster) cmd(name string, args ...string) (string, error) {
	cmd := exec.Command(name, args...)
	cmd.Env = c.env()
	var out, errb bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errb
	err := cmd.Run()
	if err != nil {
		return out.String(), fmt.Errorf("%s %s: %v: %s", name, strings.Join(args, " "), err, strings.TrimSpace(errb.String()))
	}
	return out.String(), nil
}

func freePort(t *testing.T) int {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port
}

// startSlurm starts munged, slurmctld and slurmd and waits until the node
// is idle; a cleanup stops them.
func startSlurm(t *testing.T) *slurmCluster {
	dir, err := os.MkdirTemp("", "weft-slurm-")
	if err != nil {
		t.Fatal(err)
	}
	c := &slurmCluster{t: t, dir: dir, conf: filepath.Join(dir, "slurm", "slurm.conf")}
	t.Cleanup(c.stop)
	for _, d := range []string{dir, filepath.Join(dir, "munge"), filepath.Join(dir, "slurm")} {
		if err := os.MkdirAll(d, 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.Chmod(d, 0o755); err != nil {
			t.Fatal(err)
		}
	}
	for _, d := range []string{"state", "spool", "log", "run"} {
		if err := os.MkdirAll(filepath.Join(dir, "slurm", d), 0o755); err != nil {
			t.Fatal(err)
		}
	}
	m := filepath.Join(dir, "munge")
	key := filepath.Join(m, "munge.key")
	if _, err := c.cmd("mungekey", "--create", "--bits=1024", "--keyfile="+key); err != nil {
		t.Fatal(err)
	}
	os.Chmod(key, 0o400)
	sock := filepath.Join(m, "munge.socket")
	if _, err := c.cmd("munged", "--socket="+sock, "--key-file="+key, "--log-file="+filepath.Join(m, "munged.log"),
		"--pid-file="+filepath.Join(m, "munged.pid"), "--seed-file="+filepath.Join(m, "munged.seed")); err != nil {
		t.Fatal(err)
	}
	if b, err := os.ReadFile(filepath.Join(m, "munged.pid")); err == nil {
		c.mungePID, _ = strconv.Atoi(strings.TrimSpace(string(b)))
	}
	// The node's memory as slurmd detects it (advertising more drains the
	// node); CPUs=4 over-subscribes the cores so that the three tasks run
	// at once (config_overrides lets slurmd accept it).
	hw, err := c.cmd("slurmd", "-C")
	if err != nil {
		t.Fatal(err)
	}
	mem := regexp.MustCompile(`RealMemory=(\d+)`).FindStringSubmatch(hw)
	if mem == nil {
		t.Fatalf("slurmd -C: no RealMemory in %q", hw)
	}
	// cred_expire (the job credential's lifetime, 120 s by default: the
	// AuthInfo entry of slurm.conf's manual page) is also how long a
	// requeued task waits before it may start again; 5 is the least this
	// Slurm took here (slurmctld 22.05 logged "AuthInfo=cred_expire=2
	// invalid" and kept 120).
	s := filepath.Join(dir, "slurm")
	conf := fmt.Sprintf(`ClusterName=weftci
SlurmctldHost=localhost(127.0.0.1)
SlurmctldPort=%d
SlurmdPort=%d
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
AuthInfo=socket=%s,cred_expire=5
StateSaveLocation=%s/state
SlurmdSpoolDir=%s/spool
SlurmctldPidFile=%s/run/slurmctld.pid
SlurmdPidFile=%s/run/slurmd.pid
SlurmctldLogFile=%s/log/slurmctld.log
SlurmdLogFile=%s/log/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
SchedulerType=sched/backfill
SwitchType=switch/none
MpiDefault=none
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/none
ReturnToService=2
MailProg=/bin/true
MinJobAge=600
KillWait=5
SlurmdParameters=config_overrides
NodeName=weft-node NodeAddr=127.0.0.1 NodeHostname=localhost CPUs=4 RealMemory=%s State=UNKNOWN
PartitionName=debug Nodes=weft-node Default=YES MaxTime=INFINITE State=UP OverSubscribe=NO
`, freePort(t), freePort(t), sock, s, s, s, s, s, s, mem[1])
	if err := os.WriteFile(c.conf, []byte(conf), 0o644); err != nil {
		t.Fatal(err)
	}
	daemon := func(log string, name string, args ...string) *exec.Cmd {
		f, err := os.Create(filepath.Join(s, "log", log))
		if err != nil {
			t.Fatal(err)
		}
		cmd := exec.Command(name, args...)
		cmd.Env = c.env()
		cmd.Stdout, cmd.Stderr = f, f
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		f.Close()
		go cmd.Wait()
		return cmd
	}
	c.ctld = daemon("slurmctld.out", "slurmctld", "-D", "-f", c.conf)
	c.sd = daemon("slurmd.out", "slurmd", "-D", "-N", "weft-node", "-f", c.conf)
	deadline := time.Now().Add(30 * time.Second)
	for {
		out, _ := c.cmd("sinfo", "-h", "-n", "weft-node", "-o", "%T")
		if strings.TrimSpace(out) == "idle" {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("the Slurm node is not idle after 30s (sinfo says %q); logs in %s", strings.TrimSpace(out), s)
		}
		time.Sleep(200 * time.Millisecond)
	}
	return c
}

// stop cancels the cluster's jobs, stops the daemons by their process ids
// and, as a safety net, kills any job step or job process left with this
// cluster's SLURM_CONF, then removes the folder (keeping it when the test
// failed, for its logs).
func (c *slurmCluster) stop() {
	if c.ctld != nil {
		if out, err := c.cmd("squeue", "-h", "-o", "%A"); err == nil {
			for _, id := range strings.Fields(out) {
				c.cmd("scancel", id)
			}
			for deadline := time.Now().Add(15 * time.Second); time.Now().Before(deadline); time.Sleep(200 * time.Millisecond) {
				if out, err := c.cmd("squeue", "-h"); err != nil || strings.TrimSpace(out) == "" {
					break
				}
			}
		}
	}
	for _, p := range []*exec.Cmd{c.sd, c.ctld} {
		if p != nil && p.Process != nil {
			stopPID(p.Process.Pid)
		}
	}
	if c.mungePID > 0 {
		stopPID(c.mungePID)
	}
	killStrays(c.conf)
	if c.t.Failed() {
		c.t.Logf("Slurm logs kept in %s", c.dir)
		return
	}
	os.RemoveAll(c.dir)
}

// stopPID sends SIGTERM, waits up to 20 s for the process to go, then
// sends SIGKILL.
func stopPID(pid int) {
	if syscall.Kill(pid, syscall.SIGTERM) != nil {
		return
	}
	for deadline := time.Now().Add(20 * time.Second); time.Now().Before(deadline); time.Sleep(100 * time.Millisecond) {
		if syscall.Kill(pid, 0) != nil || isZombie(pid) {
			return
		}
	}
	syscall.Kill(pid, syscall.SIGKILL)
}

func isZombie(pid int) bool {
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
	if err != nil {
		return false
	}
	s := string(b)
	i := strings.LastIndexByte(s, ')')
	return i > 0 && i+2 < len(s) && s[i+2] == 'Z'
}

// killStrays kills, by pid, any slurmstepd, or any process with a
// SLURM_JOB_ID, whose environment holds this cluster's SLURM_CONF: a job
// step survives slurmd and ignores SIGTERM. This process and its ancestors
// are spared.
func killStrays(conf string) {
	spare := map[int]bool{}
	for pid := os.Getpid(); pid > 1; {
		spare[pid] = true
		b, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
		if err != nil {
			break
		}
		f := strings.Fields(string(b[bytes.LastIndexByte(b, ')')+1:]))
		if len(f) < 2 {
			break
		}
		pid, _ = strconv.Atoi(f[1])
	}
	stepd, _ := filepath.EvalSymlinks("/usr/sbin/slurmstepd")
	ents, _ := os.ReadDir("/proc")
	for _, e := range ents {
		pid, err := strconv.Atoi(e.Name())
		if err != nil || spare[pid] {
			continue
		}
		env, err := os.ReadFile(fmt.Sprintf("/proc/%d/environ", pid))
		if err != nil || !bytes.Contains(env, []byte("\x00SLURM_CONF="+conf+"\x00")) && !bytes.HasPrefix(env, []byte("SLURM_CONF="+conf+"\x00")) {
			continue
		}
		exe, _ := os.Readlink(fmt.Sprintf("/proc/%d/exe", pid))
		if (stepd != "" && exe == stepd) || bytes.Contains(env, []byte("SLURM_JOB_ID=")) {
			syscall.Kill(pid, syscall.SIGKILL)
		}
	}
}

// jobField reads a field of 'scontrol show job' for one array task.
func (c *slurmCluster) jobField(task, field string) string {
	out, err := c.cmd("scontrol", "-o", "show", "job", task)
	if err != nil {
		return ""
	}
	m := regexp.MustCompile(`(?:^| )` + field + `=(\S*)`).FindStringSubmatch(out)
	if m == nil {
		return ""
	}
	return m[1]
}

func TestSlurmSweep(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a Slurm cluster")
	}
	if why := slurmMissing(); why != "" {
		if os.Getenv("CI") == "true" {
			t.Fatalf("the Slurm integration test cannot run: %s", why)
		}
		t.Skipf("the Slurm integration test cannot run: %s", why)
	}
	start := time.Now()
	c := startSlurm(t)
	t.Logf("cluster up in %v", time.Since(start).Round(time.Millisecond))

	const steps = 60
	work := filepath.Join(c.dir, "work")
	if err := os.MkdirAll(work, 0o755); err != nil {
		t.Fatal(err)
	}
	sweepFile := tinySweep(t, work, "seeds.toml", "seeds.runs", steps)
	sweepDir := filepath.Join(work, "seeds.runs")
	script, err := filepath.Abs(filepath.Join("..", "..", "testdata", "sweep", "sweep.sbatch"))
	if err != nil {
		t.Fatal(err)
	}
	// The README's script as it is; the command line sets what differs
	// here: three tasks, one CPU each, logs in the work folder. This test
	// binary acts as weft, each step slowed so that a task can be hit
	// mid-run.
	sb := exec.Command("sbatch", "--parsable", "--array=0-2", "--cpus-per-task=1", "--chdir="+work,
		"--output="+filepath.Join(work, "task-%A_%a.log"), script)
	sb.Env = c.env("SWEEP="+sweepFile, "WEFT="+os.Args[0], envAsWeft+"=1", envStepDelay+"=40ms")
	out, err := sb.Output()
	if err != nil {
		t.Fatalf("sbatch: %v", err)
	}
	job := strings.TrimSpace(string(out))
	task := func(i int) string { return fmt.Sprintf("%s_%d", job, i) }

	// Wait until tasks 1 and 2 have saved a checkpoint with steps to go.
	waitCheckpoint := func(i int) {
		ck := filepath.Join(sweepDir, fmt.Sprintf("run-%04d", i), checkpointsDir)
		for deadline := time.Now().Add(60 * time.Second); ; time.Sleep(50 * time.Millisecond) {
			if ents, err := checkpoint.List(ck); err == nil && len(ents) > 0 {
				if ents[0].Step >= steps-10 {
					t.Fatalf("task %d reached step %d before it could be hit", i, ents[0].Step)
				}
				return
			}
			if time.Now().After(deadline) {
				t.Fatalf("task %d saved no checkpoint in 60s (state %s)", i, c.jobField(task(i), "JobState"))
			}
		}
	}
	waitCheckpoint(1)
	waitCheckpoint(2)
	// Task 1: its weft is killed (SIGKILL, no save), then the task is
	// requeued by hand.
	h, err := runs.ReadHolder(filepath.Join(sweepDir, "run-0001"))
	if err != nil || h == nil {
		t.Fatalf("task 1's lock: %v, %v", h, err)
	}
	if err := syscall.Kill(h.PID, syscall.SIGKILL); err != nil {
		t.Fatalf("kill task 1's weft (pid %d): %v", h.PID, err)
	}
	// Task 2: SIGUSR1 to the batch shell, as --signal=B:USR1@120 sends
	// before the time limit: the script passes it on, weft saves and exits
	// 3, and the script requeues the task.
	if _, err := c.cmd("scancel", "--signal=USR1", "--batch", task(2)); err != nil {
		t.Fatal(err)
	}
	for deadline := time.Now().Add(30 * time.Second); ; time.Sleep(100 * time.Millisecond) {
		st := c.jobField(task(1), "JobState")
		if st != "RUNNING" && st != "COMPLETING" {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("task 1 still %s 30s after its weft was killed", st)
		}
	}
	if _, err := c.cmd("scontrol", "requeue", task(1)); err != nil {
		t.Fatal(err)
	}
	// Everything finishes.
	for deadline := time.Now().Add(90 * time.Second); ; time.Sleep(250 * time.Millisecond) {
		out, err := c.cmd("squeue", "-h", "-j", job)
		if err == nil && strings.TrimSpace(out) == "" {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("the array has not finished after 90s: %s", out)
		}
	}
	logs := func() string {
		var b strings.Builder
		for i := range 3 {
			l, _ := os.ReadFile(filepath.Join(work, fmt.Sprintf("task-%s_%d.log", job, i)))
			fmt.Fprintf(&b, "\n--- task %d:\n%s", i, l)
		}
		return b.String()
	}
	for i, want := range []string{"0", "1", "1"} {
		if st, ec, rs := c.jobField(task(i), "JobState"), c.jobField(task(i), "ExitCode"), c.jobField(task(i), "Restarts"); st != "COMPLETED" || ec != "0:0" || rs != want {
			t.Errorf("task %d: JobState=%s ExitCode=%s Restarts=%s, want COMPLETED 0:0 with %s restarts%s", i, st, ec, rs, want, logs())
		}
	}
	if l, _ := os.ReadFile(filepath.Join(work, fmt.Sprintf("task-%s_2.log", job))); !strings.Contains(string(l), "stopped by SIGUSR1") {
		t.Errorf("task 2's log does not show the save on SIGUSR1:%s", logs())
	}

	code, sout, serr := weftIn(t, nil, "sweep", "status", sweepFile, "--json")
	if code != exitOK {
		t.Fatalf("sweep status: exit %d: %s", code, serr)
	}
	var st struct {
		Runs    []sweep.RunStatus `json:"runs"`
		Summary map[string]int    `json:"summary"`
	}
	if err := json.Unmarshal([]byte(sout), &st); err != nil {
		t.Fatal(err)
	}
	for _, r := range st.Runs {
		if r.State != sweep.StateDone || r.Step != steps {
			t.Errorf("status of run %d: %s at step %d, want done at %d", r.Index, r.State, r.Step, steps)
		}
	}
	if len(st.Runs) != 3 || st.Summary[sweep.StateDone] != 3 {
		t.Errorf("status: %+v, want 3 runs done", st)
	}
	code, sout, serr = weftIn(t, nil, "sweep", "compare", sweepFile)
	if code != exitOK {
		t.Fatalf("sweep compare: exit %d: %s", code, serr)
	}
	for i, seed := range []int{11, 12, 13} {
		if !strings.Contains(sout, fmt.Sprintf("run %d: training.seed=%d", i, seed)) {
			t.Errorf("compare has no row for run %d:\n%s", i, sout)
		}
	}
	t.Logf("Slurm sweep: 3 tasks, one killed and requeued, one saved on SIGUSR1 and requeued by the script, all done in %v", time.Since(start).Round(time.Millisecond))
}
