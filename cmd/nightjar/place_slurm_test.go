package main

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"nightjar"
)

// TestSlurmPlaceArray submits examples/slurm/place-submit.sh to the local
// one-node cluster: a 4-task job array placing the rows in shards and a merge
// job that depends on it. It checks that every task and the merge completed
// with exit 0 and that the merged placed.parquet has the bits of the
// placement done in one go. Skipped without sbatch; under CI=true it fails
// when no cluster answers (see needSlurm).
func TestSlurmPlaceArray(t *testing.T) {
	needSlurm(t)
	ref, table := placeFixture(t)
	dir := t.TempDir()
	if err := os.Chmod(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	whole := filepath.Join(dir, "whole")
	if code, out, errs := runCLI("place", ref, "--input", table, "--out", whole, "--quiet"); code != 0 {
		t.Fatalf("place in one go: exit %d\n%s\n%s", code, out, errs)
	}
	out := filepath.Join(dir, "sharded")
	script, err := filepath.Abs("../../examples/slurm/place-submit.sh")
	if err != nil {
		t.Fatal(err)
	}
	sub := exec.Command("bash", script)
	sub.Env = append(os.Environ(), "NIGHTJAR="+binary, "REF="+ref, "INPUT="+table, "OUT="+out, "SHARDS=4",
		"SBATCH_TASK_OPTIONS=--cpus-per-task=1 --mem=1G --output="+filepath.Join(dir, "task-%a.log"),
		"SBATCH_MERGE_OPTIONS=--cpus-per-task=1 --mem=1G --output="+filepath.Join(dir, "merge.log"))
	b, err := sub.CombinedOutput()
	if err != nil {
		t.Fatalf("place-submit.sh: %v\n%s", err, b)
	}
	ids := regexp.MustCompile(`(?m)^(array|merge) (\d+)$`).FindAllStringSubmatch(string(b), -1)
	if len(ids) != 2 {
		t.Fatalf("place-submit.sh printed no job ids:\n%s", b)
	}
	array, merge := ids[0][2], ids[1][2]
	t.Cleanup(func() { _ = exec.Command("scancel", array, merge).Run() })
	logs := func() string {
		var all strings.Builder
		names, _ := filepath.Glob(filepath.Join(dir, "*.log"))
		for _, n := range names {
			c, _ := os.ReadFile(n)
			all.WriteString("== " + filepath.Base(n) + "\n" + string(c))
		}
		return all.String()
	}
	deadline := time.Now().Add(10 * time.Minute)
	for state := jobField(t, merge, "JobState"); state != "COMPLETED"; state = jobField(t, merge, "JobState") {
		if state == "FAILED" || state == "CANCELLED" || state == "TIMEOUT" || time.Now().After(deadline) {
			t.Fatalf("merge job %s ended %s (reason %s); logs:\n%s", merge, state, jobField(t, merge, "Reason"), logs())
		}
		time.Sleep(500 * time.Millisecond)
	}
	for i := range 4 {
		task := array + "_" + string(rune('0'+i))
		if st, ec := jobField(t, task, "JobState"), jobField(t, task, "ExitCode"); st != "COMPLETED" || ec != "0:0" {
			t.Errorf("array task %s: %s, exit code %s", task, st, ec)
		}
	}
	if ec := jobField(t, merge, "ExitCode"); ec != "0:0" {
		t.Errorf("merge job exit code %s", ec)
	}
	a, _ := os.ReadFile(filepath.Join(whole, nightjar.FilePlaced))
	m, err := os.ReadFile(filepath.Join(out, nightjar.FilePlaced))
	if err != nil || len(a) == 0 || !bytes.Equal(a, m) {
		t.Fatalf("the merged placed.parquet of the job array differs from the placement in one go (%v); logs:\n%s", err, logs())
	}
}
