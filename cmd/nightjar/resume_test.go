package main

import (
	"bytes"
	"errors"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"nightjar/checkpoint"
)

// killArgs are the settings of the kill/resume tests: small enough to run many
// times, long enough in the optimiser that kills land in every phase.
var killArgs = []string{"--steps", "240", "--early-steps", "60", "--checkpoint-every", "7",
	"--quiet", "--score-sample", "0", "--id", "id", "--label", "population"}

func killRows() int {
	if testing.Short() {
		return 800
	}
	return 1500
}

// reference runs the binary without interruption and returns the embedding bytes and wall time.
func reference(t *testing.T, in, dir string) ([]byte, time.Duration) {
	t.Helper()
	runDir := filepath.Join(dir, "reference")
	start := time.Now()
	cmd := exec.Command(binary, append([]string{"embed", "--input", in, "--run", runDir}, killArgs...)...)
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("reference run: %v\n%s", err, out)
	}
	b, err := os.ReadFile(filepath.Join(runDir, fileEmbedding))
	if err != nil {
		t.Fatal(err)
	}
	return b, time.Since(start)
}

// TestKillResumeSameBits kills the real binary with SIGKILL at random moments
// (a fixed seed), resumes each time, and checks that every run ends with the
// same embedding bits as the uninterrupted one. NIGHTJAR_KILLS sets the number
// of kills (default 20).
func TestKillResumeSameBits(t *testing.T) {
	kills := 20
	if v := os.Getenv("NIGHTJAR_KILLS"); v != "" {
		kills, _ = strconv.Atoi(v)
	}
	dir := t.TempDir()
	in := writeDemoTable(t, dir, killRows())
	want, took := reference(t, in, dir)
	rng := rand.New(rand.NewPCG(2026, 12))
	done, finishes := 0, 0
	for run := 0; done < kills; run++ {
		runDir := filepath.Join(dir, "killed"+strconv.Itoa(run))
		args := append([]string{"embed", "--input", in, "--run", runDir}, killArgs...)
		for attempt := 0; ; attempt++ {
			if attempt > 60 {
				t.Fatalf("run %d did not finish after %d attempts", run, attempt)
			}
			cmd := exec.Command(binary, args...)
			var stderr bytes.Buffer
			cmd.Stderr = &stderr
			if err := cmd.Start(); err != nil {
				t.Fatal(err)
			}
			exited := make(chan error, 1)
			go func() { exited <- cmd.Wait() }()
			delay := time.Duration(rng.Float64() * float64(took))
			var err error
			killed := false
			select {
			case err = <-exited:
			case <-time.After(delay):
				if done < kills {
					_ = cmd.Process.Signal(syscall.SIGKILL)
					killed = true
				}
				err = <-exited
			}
			if killed {
				var ee *exec.ExitError
				if errors.As(err, &ee) && !ee.Exited() {
					done++
				}
			}
			if err == nil {
				break
			}
			if !killed {
				t.Fatalf("run %d attempt %d failed without a kill: %v\n%s", run, attempt, err, stderr.String())
			}
			// Resume; a kill before the manifest existed means starting over.
			if _, statErr := os.Stat(filepath.Join(runDir, checkpoint.ManifestName)); statErr == nil {
				args = []string{"resume", runDir, "--quiet", "--checkpoint-every", "7", "--score-sample", "0"}
			}
		}
		got, err := os.ReadFile(filepath.Join(runDir, fileEmbedding))
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(got, want) {
			t.Errorf("run %d: the resumed embedding differs from the uninterrupted one", run)
		} else {
			finishes++
		}
	}
	t.Logf("%d SIGKILLs, %d runs finished bit-identical to the uninterrupted run", done, finishes)
}

// TestTermWritesCheckpoint: SIGTERM in the optimiser writes a state, exits 143,
// says how to resume; resuming finishes with the uninterrupted bits.
func TestTermWritesCheckpoint(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, killRows())
	want, _ := reference(t, in, dir)
	runDir := filepath.Join(dir, "termed")
	cmd := exec.Command(binary, append([]string{"embed", "--input", in, "--run", runDir}, killArgs...)...)
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	// Wait until the optimiser is running, then ask the run to stop.
	deadline := time.Now().Add(60 * time.Second)
	for {
		m, err := checkpoint.ReadManifest(filepath.Join(runDir, checkpoint.ManifestName))
		if err == nil && m.Phase == checkpoint.PhaseOptimising {
			break
		}
		if time.Now().After(deadline) {
			cmd.Process.Kill()
			t.Fatal("the optimiser phase never started")
		}
		time.Sleep(5 * time.Millisecond)
	}
	_ = cmd.Process.Signal(syscall.SIGTERM)
	err := cmd.Wait()
	var ee *exec.ExitError
	if err == nil {
		t.Fatal("the run finished before SIGTERM arrived: make the test run longer")
	}
	if !errors.As(err, &ee) || ee.ExitCode() != exitTerm {
		t.Fatalf("exit %v, want %d; stderr %s", err, exitTerm, stderr.String())
	}
	if !strings.Contains(stderr.String(), "nightjar resume "+runDir) {
		t.Errorf("stderr does not say how to resume: %q", stderr.String())
	}
	states, _ := filepath.Glob(filepath.Join(runDir, "state-*"))
	if len(states) == 0 {
		entries, _ := os.ReadDir(runDir)
		t.Fatalf("no state written on SIGTERM; stderr %q; dir %v", stderr.String(), entries)
	}
	code, _, errs := runCLI("status", runDir)
	if code != 0 {
		t.Errorf("status: %d %s", code, errs)
	}
	out, err := exec.Command(binary, "resume", runDir, "--score-sample", "0").CombinedOutput()
	if err != nil {
		t.Fatalf("resume: %v\n%s", err, out)
	}
	// The saved P is used, not recomputed (the bits would agree either way).
	if !strings.Contains(string(out), "affinities loaded from") || strings.Contains(string(out), "neighbours: exact") {
		t.Errorf("resume recomputed the neighbours or affinities:\n%s", out)
	}
	got, _ := os.ReadFile(filepath.Join(runDir, fileEmbedding))
	if !bytes.Equal(got, want) {
		t.Error("resumed after SIGTERM: embedding differs from the uninterrupted run")
	}
}

// TestResumeRefusesChangedInput: a resume whose input changed is refused
// (exit 2) unless --force.
func TestResumeRefusesChangedInput(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 600)
	runDir := filepath.Join(dir, "run")
	code, _, errs := runCLI(append([]string{"embed", "--input", in, "--run", runDir}, killArgs...)...)
	if code != 0 {
		t.Fatalf("embed: %d %s", code, errs)
	}
	// Mark the run interrupted and change the input.
	m, err := checkpoint.ReadManifest(filepath.Join(runDir, checkpoint.ManifestName))
	if err != nil {
		t.Fatal(err)
	}
	run, err := checkpoint.Open(runDir)
	if err != nil {
		t.Fatal(err)
	}
	m.Status, m.Phase = checkpoint.StatusInterrupted, checkpoint.PhaseOptimising
	if err := run.SaveManifest(m); err != nil {
		t.Fatal(err)
	}
	writeDemoTableSeed(t, in, 600, 8)
	code, _, errs = runCLI("resume", runDir, "--quiet")
	if code != exitBadInput || !strings.Contains(errs, "changed") || !strings.Contains(errs, "--force") {
		t.Errorf("resume on changed input: exit %d, %q", code, errs)
	}
}

// TestResumeBeforeInputRecorded: a run killed after its manifest was first
// written but before the input was read (found by TestKillResumeSameBits)
// resumes without --force and ends with the uninterrupted bits.
func TestResumeBeforeInputRecorded(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, killRows())
	want, _ := reference(t, in, dir)
	runDir := filepath.Join(dir, "early")
	code, _, errs := runCLI(append([]string{"embed", "--input", in, "--run", runDir}, killArgs...)...)
	if code != 0 {
		t.Fatalf("embed: %d %s", code, errs)
	}
	// Put the run back where a kill right after the first manifest leaves
	// it: phase "created", no input recorded, nothing computed.
	run, err := checkpoint.Open(runDir)
	if err != nil {
		t.Fatal(err)
	}
	m := run.Manifest()
	m.Status, m.Phase, m.Input = checkpoint.StatusRunning, checkpoint.PhaseCreated, checkpoint.Fingerprint{}
	m.Iteration, m.KL, m.Files = 0, 0, nil
	if err := run.SaveManifest(m); err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{fileGraph, fileP, fileEmbedding, fileMap, fileReport, "state-"} {
		matches, _ := filepath.Glob(filepath.Join(runDir, name+"*"))
		for _, f := range matches {
			if err := os.Remove(f); err != nil {
				t.Fatal(err)
			}
		}
	}
	code, _, errs = runCLI("resume", runDir, "--quiet")
	if code != 0 {
		t.Fatalf("resume: exit %d: %s", code, errs)
	}
	got, err := os.ReadFile(filepath.Join(runDir, fileEmbedding))
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got, want) {
		t.Error("resumed run differs from the uninterrupted one")
	}
}
