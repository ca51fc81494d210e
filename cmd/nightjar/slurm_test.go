package main

import (
	"bytes"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"
)

// needSlurm skips the test when no Slurm cluster answers, or fails it under
// CI=true, where .ci/run has started the one-node cluster of
// examples/slurm/local-cluster.sh and a green CI must mean the test ran.
func needSlurm(t *testing.T) {
	t.Helper()
	_, err := exec.LookPath("sbatch")
	if err == nil {
		err = exec.Command("sinfo", "-h").Run()
	}
	if err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatalf("no Slurm cluster answers (%v); .ci/run starts one with examples/slurm/local-cluster.sh", err)
		}
		t.Skipf("no Slurm cluster answers (%v); start one as root with: bash examples/slurm/local-cluster.sh start", err)
	}
}

// jobField reads one field of a job from scontrol.
func jobField(t *testing.T, id, field string) string {
	t.Helper()
	out, err := exec.Command("scontrol", "show", "job", "-o", id).Output()
	if err != nil {
		t.Fatalf("scontrol show job %s: %v", id, err)
	}
	m := regexp.MustCompile(`(?:^| )` + field + `=(\S*)`).FindStringSubmatch(string(out))
	if m == nil {
		t.Fatalf("job %s has no %s: %s", id, field, out)
	}
	return m[1]
}

// TestSlurmRequeue submits the overnight batch script of examples/slurm to
// the local cluster, requeues the job (as a pre-emption would) in the middle
// of the optimiser, and checks that the job was requeued once, that its
// second start resumed at an iteration above 0, and that it ended with exit
// 0 and the bits of an uninterrupted run.
func TestSlurmRequeue(t *testing.T) {
	needSlurm(t)
	dir := t.TempDir()
	if err := os.Chmod(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	in := writeDemoTable(t, dir, 3000)
	args := []string{"--id", "id", "--label", "population", "--steps", "1500", "--checkpoint-every", "10", "--score-sample", "0"}

	whole := filepath.Join(dir, "whole")
	if code, _, errs := runCLI(append([]string{"embed", "--input", in, "--run", whole, "--quiet"}, args...)...); code != 0 {
		t.Fatalf("uninterrupted run: exit %d: %s", code, errs)
	}

	runDir := filepath.Join(dir, "run")
	logFile := filepath.Join(dir, "job.log")
	script, err := filepath.Abs("../../examples/slurm/overnight.sbatch")
	if err != nil {
		t.Fatal(err)
	}
	sb := exec.Command("sbatch", append([]string{"--parsable", "--output", logFile, "--cpus-per-task", "1", "--mem", "2G", script}, args...)...)
	sb.Env = append(os.Environ(), "NIGHTJAR="+binary, "INPUT="+in, "RUN="+runDir)
	out, err := sb.CombinedOutput()
	if err != nil {
		t.Fatalf("sbatch: %v: %s", err, out)
	}
	id := strings.TrimSpace(strings.Split(string(out), ";")[0])
	t.Cleanup(func() { _ = exec.Command("scancel", id).Run() })

	// Wait for the optimiser to be under way, then requeue the job.
	deadline := time.Now().Add(3 * time.Minute)
	for {
		if time.Now().After(deadline) {
			b, _ := os.ReadFile(logFile)
			t.Fatalf("the job never reached the optimiser; log:\n%s", b)
		}
		code, so, _ := runCLI("status", runDir, "--json")
		var st struct {
			Phase     string `json:"phase"`
			Iteration int    `json:"iteration"`
			Live      bool   `json:"live"`
		}
		if code == 0 && json.Unmarshal([]byte(so), &st) == nil && st.Live && st.Phase == "optimising" && st.Iteration >= 100 {
			break
		}
		time.Sleep(200 * time.Millisecond)
	}
	if out, err := exec.Command("scontrol", "requeue", id).CombinedOutput(); err != nil {
		t.Fatalf("scontrol requeue: %v: %s", err, out)
	}
	// A requeued job waits two minutes before it is eligible again: start
	// it now (again, until it runs: the requeue takes a while on a busy
	// machine).
	deadline = time.Now().Add(8 * time.Minute)
	for state := jobField(t, id, "JobState"); state != "COMPLETED"; state = jobField(t, id, "JobState") {
		if state == "FAILED" || state == "CANCELLED" || state == "TIMEOUT" || time.Now().After(deadline) {
			b, _ := os.ReadFile(logFile)
			t.Fatalf("job %s ended %s (reason %s); log:\n%s", id, state, jobField(t, id, "Reason"), b)
		}
		// Start it only once its first instance has finished (its batch
		// step gone): a start on top of it fails the job.
		if state == "PENDING" && jobField(t, id, "Reason") == "BeginTime" &&
			exec.Command("pgrep", "-f", "slurmstepd: \\["+id+"\\.batch\\]").Run() != nil {
			time.Sleep(time.Second)
			_ = exec.Command("scontrol", "update", "jobid="+id, "StartTime=now").Run()
		}
		time.Sleep(300 * time.Millisecond)
	}
	if r := jobField(t, id, "Restarts"); r != "1" {
		t.Errorf("job restarts = %s, want 1", r)
	}
	if ec := jobField(t, id, "ExitCode"); ec != "0:0" {
		t.Errorf("job exit code = %s, want 0:0", ec)
	}
	log, _ := os.ReadFile(logFile)
	m := regexp.MustCompile(`resuming .* iteration (\d+)`).FindSubmatch(log)
	if m == nil {
		t.Fatalf("the job's log shows no resume:\n%s", log)
	}
	if it, _ := strconv.Atoi(string(m[1])); it <= 0 {
		t.Errorf("resumed at iteration %d, want above 0", it)
	}
	a, err := os.ReadFile(filepath.Join(whole, fileEmbedding))
	if err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(filepath.Join(runDir, fileEmbedding))
	if err != nil {
		t.Fatalf("the requeued job wrote no embedding: %v\n%s", err, log)
	}
	if !bytes.Equal(a, b) {
		t.Error("the requeued job's embedding differs from the uninterrupted run's")
	}
}
