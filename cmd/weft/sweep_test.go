package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"go.yaml.in/yaml/v3"

	"weft/checkpoint"
	"weft/checkpoint/runs"
	"weft/checkpoint/runs/sweep"
)

// tinySweep writes a tiny base run (tinyRun's, with a step budget) and a
// sweep file of three runs (three seeds) into dir; the sweep directory is
// sweepDir. It returns the sweep file's path.
func tinySweep(t testing.TB, dir, name, sweepDir string, steps int) string {
	t.Helper()
	base := tinyRun(t, dir)
	b, err := os.ReadFile(base)
	if err != nil {
		t.Fatal(err)
	}
	// A small baseline ladder: what is shared is checked, not its size.
	b = bytes.Replace(b, []byte("[training]\n"), fmt.Appendf(nil, "[training]\nmax_steps = %d\n", steps), 1)
	b = bytes.Replace(b, []byte("[evaluation]\n"), []byte("[evaluation]\nngram_orders = [2, 3]\nngram_smoothers = [\"witten_bell\"]\nmarkov_orders = []\nhmm_states = []\nbootstrap_samples = 50\n"), 1)
	b = append(b, "plots = false\n"...)
	if err := os.WriteFile(base, b, 0o644); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, name)
	text := fmt.Sprintf("base = %q\ndirectory = %q\n\n[[axis]]\n\"training.seed\" = [11, 12, 13]\n", base, sweepDir)
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// TestSweepIndex checks where 'sweep run' takes its index from: --index,
// then SLURM_ARRAY_TASK_ID, then JOB_COMPLETION_INDEX, else a usage error.
func TestSweepIndex(t *testing.T) {
	defer func(g func(string) string) { getenv = g }(getenv)
	for _, tc := range []struct {
		name  string
		args  []string
		env   map[string]string
		want  int
		error string
	}{
		{"flag", []string{"--index", "4"}, map[string]string{envSlurmIndex: "2", envKubeIndex: "1"}, 4, ""},
		{"flag zero", []string{"--index", "0"}, map[string]string{envSlurmIndex: "2"}, 0, ""},
		{"slurm before kubernetes", nil, map[string]string{envSlurmIndex: "2", envKubeIndex: "1"}, 2, ""},
		{"kubernetes", nil, map[string]string{envKubeIndex: "1"}, 1, ""},
		{"none", nil, nil, 0, "no run index: give --index I"},
		{"garbage", nil, map[string]string{envSlurmIndex: "x"}, 0, `SLURM_ARRAY_TASK_ID="x" is not a run index`},
		{"negative flag", []string{"--index", "-1"}, nil, 0, "--index must be at least 0"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			getenv = func(k string) string { return tc.env[k] }
			var got int
			var gotErr error
			d := &deps{Out: new(bytes.Buffer), Err: new(bytes.Buffer), Now: time.Now}
			cmd := newSweepCmd(d, func(verb string, o *sweepOptions) error {
				got, gotErr = sweepIndex(o)
				return nil
			})
			cmd.SetArgs(append([]string{"run", "s.toml"}, tc.args...))
			if err := cmd.Execute(); err != nil {
				t.Fatal(err)
			}
			if tc.error != "" {
				var ue *usageError
				if !errors.As(gotErr, &ue) || !strings.Contains(gotErr.Error(), tc.error) {
					t.Fatalf("got %v, want a usage error containing %q", gotErr, tc.error)
				}
				return
			}
			if gotErr != nil || got != tc.want {
				t.Errorf("got %d, %v, want %d", got, gotErr, tc.want)
			}
		})
	}
}

// TestSweepConcurrent runs the three indices of a sweep as three processes
// at once on one sweep directory, SIGKILLs one mid-run and runs it again,
// and checks that each ends with the same final weights, bit for bit, as
// the same runs one after another; that the baselines were fitted once
// for the three; that a second process on a held run exits with the busy
// status; and that status and compare see three finished runs.
func TestSweepConcurrent(t *testing.T) {
	if testing.Short() {
		t.Skip("trains three runs in child processes")
	}
	const steps = 60
	dir := t.TempDir()
	sweepFile := tinySweep(t, dir, "seeds.toml", "seeds.runs", steps)
	sweepDir := filepath.Join(dir, "seeds.runs")

	type child struct {
		cmd  *exec.Cmd
		errb *syncBuffer
	}
	start := func(i int, delay time.Duration, more ...string) child {
		cmd := exec.Command(os.Args[0], append([]string{"sweep", "run", sweepFile, "--index", fmt.Sprint(i)}, more...)...)
		cmd.Env = append(os.Environ(), envAsWeft+"=1", envStepDelay+"="+delay.String())
		errb := &syncBuffer{}
		cmd.Stderr = errb
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		return child{cmd, errb}
	}
	kids := []child{start(0, 2*time.Millisecond, "--quiet"), start(1, 20*time.Millisecond, "--quiet"), start(2, 2*time.Millisecond, "--quiet")}
	defer func() {
		for _, k := range kids {
			if k.cmd.ProcessState == nil {
				k.cmd.Process.Kill()
				k.cmd.Wait()
			}
		}
	}()
	// Run 1 (20 ms a step) is killed once it has saved a checkpoint, with
	// steps left to train.
	ck1 := filepath.Join(sweepDir, "run-0001", checkpointsDir)
	deadline := time.Now().Add(30 * time.Second)
	for {
		if ents, err := checkpoint.List(ck1); err == nil && len(ents) > 0 && ents[0].Step < steps-10 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("run 1 saved no checkpoint in 30s: %s", kids[1].errb.String())
		}
		time.Sleep(5 * time.Millisecond)
	}
	// A second process on the held run is turned away with the busy status.
	code, _, stderr := weftIn(t, nil, "sweep", "run", sweepFile, "--index", "1", "--quiet")
	if code != exitBusy || !strings.Contains(stderr, "in use by pid") {
		t.Errorf("second process on run 1: exit %d, %q; want %d naming the holder", code, stderr, exitBusy)
	}
	kids[1].cmd.Process.Signal(syscall.SIGKILL)
	kids[1].cmd.Wait()
	if ws, ok := kids[1].cmd.ProcessState.Sys().(syscall.WaitStatus); !ok || !ws.Signaled() {
		t.Fatalf("run 1 ended before the kill: %v: %s", kids[1].cmd.ProcessState, kids[1].errb.String())
	}
	killedAt, err := checkpoint.List(ck1)
	if err != nil || len(killedAt) == 0 {
		t.Fatalf("run 1 after the kill: %v", err)
	}
	// Status sees the killed run's lock as stale (its process is gone).
	code, out, stderr := weftIn(t, nil, "sweep", "status", sweepFile, "--json")
	if code != exitOK {
		t.Fatalf("status: exit %d: %s", code, stderr)
	}
	var st struct {
		Runs    []sweep.RunStatus `json:"runs"`
		Summary map[string]int    `json:"summary"`
	}
	if err := json.Unmarshal([]byte(out), &st); err != nil {
		t.Fatal(err)
	}
	if len(st.Runs) != 3 || st.Runs[1].State != sweep.StateStale || st.Runs[1].Step < killedAt[0].Step {
		t.Errorf("status after the kill: got %+v, want run 1 stale at step %d or later", st.Runs, killedAt[0].Step)
	}
	// Runs 0 and 2 finish (one of them fitted the shared baselines), then
	// run 1 resumes: it must reuse them, not fit them again.
	for i, k := range []child{kids[0], kids[2]} {
		if err := k.cmd.Wait(); err != nil {
			t.Fatalf("child %d: %v: %s", i, err, k.errb.String())
		}
	}
	manifests, _ := filepath.Glob(filepath.Join(sweepDir, sweep.BaselinesDir, "*", runs.ManifestFile))
	if len(manifests) != 1 {
		t.Fatalf("shared baselines after runs 0 and 2: got manifests %v, want one", manifests)
	}
	fitted, err := os.Stat(manifests[0])
	if err != nil {
		t.Fatal(err)
	}
	again := start(1, 0)
	kids = append(kids, again)
	if err := again.cmd.Wait(); err != nil {
		t.Fatalf("run 1 again: %v: %s", err, again.errb.String())
	}
	if now, err := os.Stat(manifests[0]); err != nil || !os.SameFile(fitted, now) {
		t.Errorf("run 1 fitted the shared baselines again (%v)", err)
	}
	if want := "resuming from " + filepath.Join(ck1, checkpoint.StepName(killedAt[0].Step)); !strings.Contains(again.errb.String(), want) {
		t.Errorf("run 1 again: got %q, want %q", again.errb.String(), want)
	}

	// The same runs, one after another, in another sweep directory.
	seqFile := filepath.Join(dir, "seq.toml")
	b, _ := os.ReadFile(sweepFile)
	os.WriteFile(seqFile, bytes.Replace(b, []byte(`"seeds.runs"`), []byte(`"seq.runs"`), 1), 0o644)
	for i := range 3 {
		if code, _, stderr := weftIn(t, nil, "sweep", "run", seqFile, "--index", fmt.Sprint(i), "--quiet"); code != exitOK {
			t.Fatalf("sequential run %d: exit %d: %s", i, code, stderr)
		}
	}
	name := checkpoint.StepName(steps)
	for i := range 3 {
		run := fmt.Sprintf("run-%04d", i)
		sameTrainingState(t, filepath.Join(sweepDir, run, checkpointsDir, name), filepath.Join(dir, "seq.runs", run, checkpointsDir, name))
		sameTrainingState(t, filepath.Join(sweepDir, run, checkpointsDir, checkpoint.BestName), filepath.Join(dir, "seq.runs", run, checkpointsDir, checkpoint.BestName))
		if _, err := os.Stat(filepath.Join(sweepDir, run, runs.ReportDir, "eval-test.json")); err != nil {
			t.Errorf("run %d has no evaluation: %v", i, err)
		}
	}
	// One shared baselines folder, fitted once, for the three runs.
	shared, err := os.ReadDir(filepath.Join(sweepDir, sweep.BaselinesDir))
	if err != nil || len(shared) != 1 {
		t.Fatalf("shared baselines: got %v, %v, want one folder", shared, err)
	}
	if _, err := runs.ReadManifest(filepath.Join(sweepDir, sweep.BaselinesDir, shared[0].Name())); err != nil {
		t.Errorf("shared baselines: %v", err)
	}
	for i := range 3 {
		if _, err := os.Stat(filepath.Join(sweepDir, fmt.Sprintf("run-%04d", i), runs.BaselinesDir)); err == nil {
			t.Errorf("run %d fitted baselines of its own", i)
		}
	}

	// Done runs exit 0 at once; status and compare see all three.
	code, out, stderr = weftIn(t, nil, "sweep", "run", sweepFile, "--index", "2")
	if code != exitOK || !strings.Contains(out, "run 2 (training.seed=13) is already done") {
		t.Errorf("done run again: exit %d, %q, %q", code, out, stderr)
	}
	code, out, _ = weftIn(t, nil, "sweep", "status", sweepFile)
	if code != exitOK || !strings.Contains(out, "3 runs: 3 done") {
		t.Errorf("status: exit %d:\n%s", code, out)
	}
	code, out, stderr = weftIn(t, nil, "sweep", "compare", sweepFile)
	if code != exitOK {
		t.Fatalf("compare: exit %d: %s", code, stderr)
	}
	for i, seed := range []int{11, 12, 13} {
		if !strings.Contains(out, fmt.Sprintf("run %d: training.seed=%d", i, seed)) {
			t.Errorf("compare: no row for run %d:\n%s", i, out)
		}
	}
	if !strings.Contains(out, "3-gram witten_bell") {
		t.Errorf("compare: no baseline row:\n%s", out)
	}
}

// TestSweepLocalRunner runs a sweep with --all --parallel 2 and checks
// that every run finishes, with the same weights as a run by index.
func TestSweepLocalRunner(t *testing.T) {
	skipInShort(t)
	dir := t.TempDir()
	sweepFile := tinySweep(t, dir, "all.toml", "all.runs", 20)
	code, out, stderr := weftIn(t, nil, "sweep", "run", sweepFile, "--all", "--parallel", "2")
	if code != exitOK {
		t.Fatalf("--all: exit %d: %s", code, stderr)
	}
	if n := strings.Count(out, " done: step budget reached"); n != 3 {
		t.Errorf("--all: got %d finished runs, want 3:\n%s", n, out)
	}
	one := filepath.Join(dir, "one.toml")
	b, _ := os.ReadFile(sweepFile)
	os.WriteFile(one, bytes.Replace(b, []byte(`"all.runs"`), []byte(`"one.runs"`), 1), 0o644)
	if code, _, stderr := weftIn(t, nil, "sweep", "run", one, "--index", "2"); code != exitOK {
		t.Fatalf("--index 2: exit %d: %s", code, stderr)
	}
	name := checkpoint.StepName(20)
	sameTrainingState(t, filepath.Join(dir, "all.runs", "run-0002", checkpointsDir, name), filepath.Join(dir, "one.runs", "run-0002", checkpointsDir, name))

	// A budget raised in the base file: the done run trains on from its
	// last checkpoint instead of exiting at once.
	base := filepath.Join(dir, "run.toml")
	b, _ = os.ReadFile(base)
	os.WriteFile(base, bytes.Replace(b, []byte("max_steps = 20"), []byte("max_steps = 30"), 1), 0o644)
	code, out, stderr = weftIn(t, nil, "sweep", "run", one, "--index", "2")
	if code != exitOK || !strings.Contains(out, "at step 30") || !strings.Contains(stderr, "resuming from") {
		t.Errorf("raised budget: exit %d, %q, %q; want a resume to step 30", code, out, stderr)
	}
}

// TestSweepExitStatuses checks the documented statuses of failures for
// good: a bad sweep file and an index outside the plan give 5, a missing
// index 2.
func TestSweepExitStatuses(t *testing.T) {
	dir := t.TempDir()
	sweepFile := tinySweep(t, dir, "s.toml", "s.runs", 10)
	bad := filepath.Join(dir, "bad.toml")
	os.WriteFile(bad, []byte("base = \"run.toml\"\n[[axis]]\n\"model.hidden\" = [1, 2]\n"), 0o644)
	defer func(g func(string) string) { getenv = g }(getenv)
	getenv = func(string) string { return "" }
	for _, tc := range []struct {
		args []string
		code int
		msg  string
	}{
		{[]string{"sweep", "run", sweepFile, "--index", "3"}, exitForGood, "run 3: index not in the sweep plan (it has 0-2)"},
		{[]string{"sweep", "run", bad, "--index", "0"}, exitForGood, `unknown run-file key "model.hidden"`},
		{[]string{"sweep", "plan", bad}, exitForGood, `unknown run-file key "model.hidden"`},
		{[]string{"sweep", "run", sweepFile}, exitUsage, "no run index"},
		{[]string{"sweep", "run", sweepFile, "--parallel", "2"}, exitUsage, "--parallel goes with --all"},
	} {
		code, _, stderr := weftIn(t, nil, tc.args...)
		if code != tc.code || !strings.Contains(stderr, tc.msg) || strings.Count(strings.TrimSpace(stderr), "\n") > 1 {
			t.Errorf("%v: exit %d, %q; want %d and %q", tc.args[1:3], code, stderr, tc.code, tc.msg)
		}
	}
}

// TestSweepStealStale leaves a lock on a run directory as a dead node of
// another host would, and checks that 'sweep run' leaves it alone, with
// the busy status and the advice, until --steal-stale takes it over.
func TestSweepStealStale(t *testing.T) {
	skipInShort(t)
	dir := t.TempDir()
	sweepFile := tinySweep(t, dir, "s.toml", "s.runs", 10)
	run0 := filepath.Join(dir, "s.runs", "run-0000")
	if err := os.MkdirAll(run0, 0o755); err != nil {
		t.Fatal(err)
	}
	lock := func(age time.Duration) {
		beat := time.Now().UTC().Add(-age).Truncate(time.Second)
		h := runs.Holder{Host: "node-17.cluster.example", PID: 4711, Started: beat.Add(-time.Hour), Heartbeat: beat}
		b, _ := json.Marshal(h)
		if err := os.WriteFile(runs.Layout(run0).Lock(), b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	lock(time.Minute)
	code, _, stderr := weftIn(t, nil, "sweep", "run", sweepFile, "--index", "0", "--steal-stale")
	if code != exitBusy || !strings.Contains(stderr, "pid 4711 on host node-17.cluster.example") || !strings.Contains(stderr, "last heartbeat 1m0s ago") {
		t.Errorf("fresh heartbeat, --steal-stale: exit %d, %q; want %d naming the holder", code, stderr, exitBusy)
	}
	lock(time.Hour)
	code, _, stderr = weftIn(t, nil, "sweep", "run", sweepFile, "--index", "0")
	if code != exitBusy || !strings.Contains(stderr, "take it over with --steal-stale") {
		t.Errorf("stale heartbeat without --steal-stale: exit %d, %q; want %d with the advice", code, stderr, exitBusy)
	}
	code, out, stderr := weftIn(t, nil, "sweep", "run", sweepFile, "--index", "0", "--steal-stale")
	if code != exitOK || !strings.Contains(stderr, "took over the stale lock of "+run0+", held by pid 4711 on host node-17.cluster.example") {
		t.Errorf("stale heartbeat with --steal-stale: exit %d, %q, %q; want 0 and the takeover reported", code, out, stderr)
	}
}

// k8sJob is the part of the Kubernetes batch/v1 Job schema the example
// manifest uses, field names as in the API reference
// (kubernetes.io/docs/reference/kubernetes-api/workload-resources/job-v1/);
// decoding with KnownFields rejects a misspelt field.
type k8sJob struct {
	APIVersion string `yaml:"apiVersion"`
	Kind       string `yaml:"kind"`
	Metadata   struct {
		Name string `yaml:"name"`
	} `yaml:"metadata"`
	Spec struct {
		CompletionMode   string `yaml:"completionMode"`
		Completions      int    `yaml:"completions"`
		Parallelism      int    `yaml:"parallelism"`
		BackoffLimit     int    `yaml:"backoffLimit"`
		PodFailurePolicy struct {
			Rules []struct {
				Action      string `yaml:"action"`
				OnExitCodes *struct {
					ContainerName string `yaml:"containerName"`
					Operator      string `yaml:"operator"`
					Values        []int  `yaml:"values"`
				} `yaml:"onExitCodes"`
				OnPodConditions []struct {
					Type string `yaml:"type"`
				} `yaml:"onPodConditions"`
			} `yaml:"rules"`
		} `yaml:"podFailurePolicy"`
		Template struct {
			Spec struct {
				RestartPolicy                 string `yaml:"restartPolicy"`
				TerminationGracePeriodSeconds int    `yaml:"terminationGracePeriodSeconds"`
				Containers                    []struct {
					Name  string   `yaml:"name"`
					Image string   `yaml:"image"`
					Args  []string `yaml:"args"`
					Env   []struct {
						Name  string `yaml:"name"`
						Value string `yaml:"value"`
					} `yaml:"env"`
					Resources struct {
						Requests map[string]string `yaml:"requests"`
					} `yaml:"resources"`
					VolumeMounts []struct {
						Name      string `yaml:"name"`
						MountPath string `yaml:"mountPath"`
					} `yaml:"volumeMounts"`
				} `yaml:"containers"`
				Volumes []struct {
					Name                  string `yaml:"name"`
					PersistentVolumeClaim struct {
						ClaimName string `yaml:"claimName"`
					} `yaml:"persistentVolumeClaim"`
				} `yaml:"volumes"`
			} `yaml:"spec"`
		} `yaml:"template"`
	} `yaml:"spec"`
}

// TestKubernetesManifest checks the README's indexed-job manifest against
// the Job fields it uses and against weft: one completion per run of the
// example sweep, the index from JOB_COMPLETION_INDEX (what Kubernetes sets
// in Indexed mode: the Job page of the Kubernetes documentation, "Completion
// mode"), a grace period long enough for a save, and a pod failure policy
// built on the documented exit statuses.
func TestKubernetesManifest(t *testing.T) {
	b, err := os.ReadFile(filepath.Join("..", "..", "testdata", "sweep", "sweep-job.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	dec := yaml.NewDecoder(bytes.NewReader(b))
	dec.KnownFields(true)
	var job k8sJob
	if err := dec.Decode(&job); err != nil {
		t.Fatalf("sweep-job.yaml: %v", err)
	}
	sw, err := sweep.Load(filepath.Join("..", "..", "testdata", "sweep", "harbour-sweep.toml"))
	if err != nil {
		t.Fatal(err)
	}
	exp, err := sw.Expand()
	if err != nil {
		t.Fatal(err)
	}
	s := job.Spec
	checks := []struct {
		what string
		ok   bool
	}{
		{"apiVersion batch/v1, kind Job", job.APIVersion == "batch/v1" && job.Kind == "Job"},
		{"completionMode Indexed", s.CompletionMode == "Indexed"},
		{fmt.Sprintf("completions = the sweep's %d runs", len(exp)), s.Completions == len(exp)},
		{"0 < parallelism <= completions", s.Parallelism > 0 && s.Parallelism <= s.Completions},
		{"restartPolicy Never (a podFailurePolicy requires it)", s.Template.Spec.RestartPolicy == "Never"},
		// The grace period covers a save: finishing a window and writing a
		// checkpoint takes seconds for the models weft trains; 120 s is
		// the margin the Slurm script gives too.
		{"terminationGracePeriodSeconds >= 120", s.Template.Spec.TerminationGracePeriodSeconds >= 120},
		{"one container", len(s.Template.Spec.Containers) == 1},
	}
	for _, c := range checks {
		if !c.ok {
			t.Errorf("sweep-job.yaml: want %s", c.what)
		}
	}
	if t.Failed() {
		return
	}
	c := s.Template.Spec.Containers[0]
	if len(c.Args) < 3 || c.Args[0] != "sweep" || c.Args[1] != "run" {
		t.Fatalf("container args %v: want sweep run SWEEP", c.Args)
	}
	for _, a := range c.Args {
		if strings.HasPrefix(a, "--index") || strings.HasPrefix(a, "--all") {
			t.Errorf("container args %v: the index must come from %s", c.Args, envKubeIndex)
		}
	}
	for _, e := range c.Env {
		if e.Name == envKubeIndex || e.Name == envSlurmIndex {
			t.Errorf("env sets %s: Kubernetes sets %s itself", e.Name, envKubeIndex)
		}
	}
	// The index variable reaches 'sweep run': parse the container's
	// command line as weft does, with only JOB_COMPLETION_INDEX set.
	defer func(g func(string) string) { getenv = g }(getenv)
	getenv = func(k string) string { return map[string]string{envKubeIndex: "4"}[k] }
	d := &deps{Out: new(bytes.Buffer), Err: new(bytes.Buffer), Now: time.Now}
	var idx int
	var idxErr error
	cmd := newSweepCmd(d, func(verb string, o *sweepOptions) error {
		if verb != "run" {
			t.Errorf("args %v run the %s verb", c.Args, verb)
		}
		idx, idxErr = sweepIndex(o)
		return nil
	})
	cmd.SetArgs(c.Args[1:])
	cmd.SetOut(d.Out)
	cmd.SetErr(d.Err)
	if err := cmd.Execute(); err != nil || idxErr != nil || idx != 4 {
		t.Errorf("container args %v with %s=4: index %d, %v, %v", c.Args, envKubeIndex, idx, err, idxErr)
	}
	// The sweep file lies on the shared volume.
	mounted := false
	for _, m := range c.VolumeMounts {
		for _, v := range s.Template.Spec.Volumes {
			if v.Name == m.Name && v.PersistentVolumeClaim.ClaimName != "" && strings.HasPrefix(c.Args[2], m.MountPath+"/") {
				mounted = true
			}
		}
	}
	if !mounted {
		t.Errorf("the sweep file %s is not on a mounted persistent volume", c.Args[2])
	}
	// The pod failure policy: usage and for-good failures end the job,
	// an interruption that saved (and a disruption) is retried without
	// counting against backoffLimit, everything else counts.
	actions := map[int]string{}
	disruption := false
	for _, r := range s.PodFailurePolicy.Rules {
		if r.OnExitCodes != nil {
			if r.OnExitCodes.ContainerName != c.Name || r.OnExitCodes.Operator != "In" {
				t.Errorf("rule %s: container %q operator %q, want %q In", r.Action, r.OnExitCodes.ContainerName, r.OnExitCodes.Operator, c.Name)
			}
			for _, v := range r.OnExitCodes.Values {
				actions[v] = r.Action
			}
		}
		for _, pc := range r.OnPodConditions {
			disruption = disruption || (pc.Type == "DisruptionTarget" && r.Action == "Ignore")
		}
	}
	want := map[int]string{exitUsage: "FailJob", exitForGood: "FailJob", exitInterrupted: "Ignore"}
	if fmt.Sprint(actions) != fmt.Sprint(want) {
		t.Errorf("pod failure policy by exit status: got %v, want %v", actions, want)
	}
	if !disruption {
		t.Error("pod failure policy: want Ignore on the DisruptionTarget condition")
	}
}

// TestREADMESweepExamples checks that the README shows exactly the example
// files the tests use.
func TestREADMESweepExamples(t *testing.T) {
	readme, err := os.ReadFile(filepath.Join("..", "..", "README.md"))
	if err != nil {
		t.Fatal(err)
	}
	for _, ex := range []struct{ file, fence string }{
		{"sweep.sbatch", "bash"},
		{"sweep-job.yaml", "yaml"},
		{"harbour-sweep.toml", "toml"},
	} {
		b, err := os.ReadFile(filepath.Join("..", "..", "testdata", "sweep", ex.file))
		if err != nil {
			t.Fatal(err)
		}
		block := "```" + ex.fence + "\n" + string(b) + "```\n"
		if !bytes.Contains(readme, []byte(block)) {
			t.Errorf("README.md does not show testdata/sweep/%s as it is (a ```%s block with the file's exact text)", ex.file, ex.fence)
		}
	}
}
