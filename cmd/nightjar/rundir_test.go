package main

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"sync/atomic"
	"testing"

	"nightjar"
	"nightjar/checkpoint"
)

// The tests of this file check run directories as people and schedulers
// touch them, through the command line.

// TestStatusDuringRun runs status in a tight loop against a live run: the
// run must end normally (status never removes or rewrites its files).
func TestStatusDuringRun(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 1500)
	runDir := filepath.Join(dir, "run")
	cmd := exec.Command(binary, append([]string{"embed", "--input", in, "--run", runDir}, killArgs...)...)
	var errb bytes.Buffer
	cmd.Stderr = &errb
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	done := make(chan error)
	go func() { done <- cmd.Wait() }()
	var looks int
	var runningSeen bool
	for {
		select {
		case err := <-done:
			if err != nil {
				t.Fatalf("the run failed while status looked at it: %v\n%s", err, errb.String())
			}
			if looks < 20 || !runningSeen {
				t.Errorf("status ran %d times (saw it running: %v); the test did not exercise a live run", looks, runningSeen)
			}
			return
		default:
		}
		out, _ := exec.Command(binary, "status", runDir).CombinedOutput()
		looks++
		runningSeen = runningSeen || strings.Contains(string(out), "status:     running")
	}
}

// TestOneWriter starts two embeds into one new directory, at once and after
// the first has logged a phase: exactly one runs, the other exits 2 naming
// the holder's pid and host.
func TestOneWriter(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 1500)
	host, _ := os.Hostname()
	check := func(t *testing.T, errs [2]string, codes [2]int) {
		t.Helper()
		ok, refused := 0, -1
		for i, c := range codes {
			switch c {
			case 0:
				ok++
			case exitBadInput:
				refused = i
			}
		}
		if ok != 1 || refused < 0 {
			t.Fatalf("exit codes %v, want one 0 and one 2; stderr:\n%s\n---\n%s", codes, errs[0], errs[1])
		}
		msg := errs[refused]
		if strings.Count(strings.TrimSpace(msg), "\n") != 0 || !regexp.MustCompile(`pid \d+ on host `+regexp.QuoteMeta(host)).MatchString(msg) {
			t.Errorf("refusal %q does not name the holder in one line", msg)
		}
	}
	t.Run("at once", func(t *testing.T) {
		runDir := filepath.Join(dir, "same")
		var cmds [2]*exec.Cmd
		var errb [2]bytes.Buffer
		for i := range cmds {
			cmds[i] = exec.Command(binary, append([]string{"embed", "--input", in, "--run", runDir}, killArgs...)...)
			cmds[i].Stderr = &errb[i]
		}
		for _, c := range cmds {
			if err := c.Start(); err != nil {
				t.Fatal(err)
			}
		}
		var codes [2]int
		for i, c := range cmds {
			_ = c.Wait()
			codes[i] = c.ProcessState.ExitCode()
		}
		check(t, [2]string{errb[0].String(), errb[1].String()}, codes)
	})
	t.Run("after a phase", func(t *testing.T) {
		runDir := filepath.Join(dir, "later")
		args := []string{"embed", "--input", in, "--run", runDir, "--steps", "600", "--checkpoint-every", "7", "--score-sample", "0"}
		first := exec.Command(binary, args...)
		pipe, err := first.StderrPipe()
		if err != nil {
			t.Fatal(err)
		}
		if err := first.Start(); err != nil {
			t.Fatal(err)
		}
		var firstErr strings.Builder
		sc := bufio.NewScanner(pipe)
		for sc.Scan() {
			firstErr.WriteString(sc.Text() + "\n")
			if strings.Contains(sc.Text(), "neighbours") {
				break
			}
		}
		second := exec.Command(binary, args...)
		var errb bytes.Buffer
		second.Stderr = &errb
		_ = second.Run()
		rest, _ := io.ReadAll(pipe)
		firstErr.Write(rest)
		_ = first.Wait()
		check(t, [2]string{firstErr.String(), errb.String()}, [2]int{first.ProcessState.ExitCode(), second.ProcessState.ExitCode()})
	})
}

// errStop stops a run at a chosen write, as a kill would.
var errStop = errors.New("stopped at a write")

// stopFS is the operating system's file system that panics with errStop at
// its step-th operation (create, write, chmod, sync, close, rename, remove,
// directory sync), leaving the files as a kill there would.
type stopFS struct {
	checkpoint.OSFS
	at, n int
}

func (f *stopFS) step() {
	if f.n == f.at {
		panic(errStop)
	}
	f.n++
}

func (f *stopFS) CreateTemp(dir, pattern string) (checkpoint.File, error) {
	f.step()
	file, err := f.OSFS.CreateTemp(dir, pattern)
	if err != nil {
		return nil, err
	}
	return &stopFile{File: file, fs: f}, nil
}
func (f *stopFS) Rename(a, b string) error      { f.step(); return f.OSFS.Rename(a, b) }
func (f *stopFS) Remove(name string) error      { f.step(); return f.OSFS.Remove(name) }
func (f *stopFS) SyncDir(dir string) error      { f.step(); return f.OSFS.SyncDir(dir) }
func (f *stopFile) Write(p []byte) (int, error) { f.fs.step(); return f.File.Write(p) }
func (f *stopFile) Sync() error                 { f.fs.step(); return f.File.Sync() }
func (f *stopFile) Close() error                { f.fs.step(); return f.File.Close() }
func (f *stopFile) Chmod(m os.FileMode) error   { f.fs.step(); return f.File.Chmod(m) }

type stopFile struct {
	checkpoint.File
	fs *stopFS
}

// TestKillAtFirstManifest stops a new run at each write of its first
// manifest (as a kill there would), then runs the command a batch job runs
// every time, embed --or-continue: it must complete the run to the bits of
// an uninterrupted one.
func TestKillAtFirstManifest(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 600)
	args := []string{"--steps", "120", "--early-steps", "30", "--checkpoint-every", "20", "--score-sample", "0", "--id", "id", "--label", "population"}
	whole := filepath.Join(dir, "whole")
	if code, _, errs := runCLI(append([]string{"embed", "--input", in, "--run", whole, "--quiet"}, args...)...); code != 0 {
		t.Fatalf("uninterrupted run: %d %s", code, errs)
	}
	want, _ := os.ReadFile(filepath.Join(whole, fileEmbedding))
	s := nightjar.DefaultSettings()
	for i := 0; i < len(args); i += 2 {
		if args[i] != "--checkpoint-every" && args[i] != "--score-sample" {
			if err := s.Set(args[i][2:], args[i+1]); err != nil {
				t.Fatal(err)
			}
		}
	}
	// The first manifest is written by the first operations of the run's
	// file system: a temporary file created, written, synced, closed,
	// renamed, the directory synced.
	for at := 0; at < 8; at++ {
		runDir := filepath.Join(dir, "cut", string(rune('a'+at)))
		rt := nightjar.DefaultRuntime()
		rt.CheckpointEvery, rt.ScoreSample, rt.FS = 20, 0, &stopFS{at: at}
		func() {
			defer func() {
				if r := recover(); r != nil && r != errStop {
					panic(r)
				}
			}()
			_, _ = nightjar.Embed(context.Background(), nightjar.FromFile(in), runDir, s, rt, nil)
		}()
		code, _, errs := runCLI(append([]string{"embed", "--or-continue", "--input", in, "--run", runDir, "--quiet"}, args...)...)
		if code != 0 {
			t.Fatalf("stopped at write %d: embed --or-continue: exit %d: %s", at, code, errs)
		}
		got, err := os.ReadFile(filepath.Join(runDir, fileEmbedding))
		if err != nil || !bytes.Equal(got, want) {
			t.Errorf("stopped at write %d: the completed run differs from the uninterrupted one (%v)", at, err)
		}
	}
}

// interruptedRun makes a run in runDir stopped in the optimiser, with a
// checkpoint: a cancelled context, as a SIGTERM would.
func interruptedRun(t *testing.T, in, runDir string, seed string) {
	t.Helper()
	s := nightjar.DefaultSettings()
	for _, kv := range [][2]string{{"steps", "200"}, {"early-steps", "50"}, {"seed", seed}, {"id", "id"}, {"label", "population"}} {
		if err := s.Set(kv[0], kv[1]); err != nil {
			t.Fatal(err)
		}
	}
	rt := nightjar.DefaultRuntime()
	rt.CheckpointEvery, rt.ScoreSample = 10, 0
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	_, err := nightjar.Embed(ctx, nightjar.FromFile(in), runDir, s, rt, &cancelAt{at: 100, cancel: cancel})
	var stop *nightjar.StoppedError
	if !errors.As(err, &stop) {
		t.Fatalf("interrupted run: %v", err)
	}
}

// cancelAt cancels when the optimiser reaches an iteration.
type cancelAt struct {
	phase  atomic.Value
	at     int64
	cancel context.CancelFunc
}

func (c *cancelAt) Phase(name string, _ int64) { c.phase.Store(name) }
func (c *cancelAt) Progress(done, _ int64) {
	if p, _ := c.phase.Load().(string); p == "optimising" && done >= c.at {
		c.cancel()
	}
}
func (c *cancelAt) Detail(string) {}
func (c *cancelAt) Done()         {}
func (c *cancelAt) Note(string)   {}
func (c *cancelAt) Warn(string)   {}

// TestTamperedAndForeignFiles: a manifest edited outside nightjar is not
// used (the previous copy is, with a warning), and a graph, P or state file
// copied from another run with the same rows is refused and recomputed; each
// run still ends with its own uninterrupted bits.
func TestTamperedAndForeignFiles(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 700)
	finish := func(runDir string) []byte {
		t.Helper()
		code, _, errs := runCLI("resume", runDir, "--quiet")
		if code != 0 {
			t.Fatalf("resume %s: exit %d: %s", runDir, code, errs)
		}
		b, _ := os.ReadFile(filepath.Join(runDir, fileEmbedding))
		return b
	}
	ref := filepath.Join(dir, "ref")
	interruptedRun(t, in, ref, "5")
	want := finish(ref)

	tampered := filepath.Join(dir, "tampered")
	interruptedRun(t, in, tampered, "5")
	mp := filepath.Join(tampered, checkpoint.ManifestName)
	b, _ := os.ReadFile(mp)
	edited := strings.Replace(string(b), `"perplexity": 30`, `"perplexity": 20`, 1)
	if edited == string(b) {
		t.Fatalf("the edit did not apply to %s", b)
	}
	if err := os.WriteFile(mp, []byte(edited), 0o644); err != nil {
		t.Fatal(err)
	}
	code, _, errs := runCLI("resume", tampered)
	if code != 0 || !strings.Contains(errs, "outside nightjar") {
		t.Fatalf("resume of a tampered manifest: exit %d: %s", code, errs)
	}
	if got, _ := os.ReadFile(filepath.Join(tampered, fileEmbedding)); !bytes.Equal(got, want) {
		t.Error("the tampered manifest's settings were used")
	}

	for _, file := range []string{fileGraph + ".njs", fileP + ".njs", "state-000000100.njs"} {
		t.Run(file, func(t *testing.T) {
			own, other := filepath.Join(dir, "own-"+file), filepath.Join(dir, "other-"+file)
			interruptedRun(t, in, own, "5")
			interruptedRun(t, in, other, "6")
			data, err := os.ReadFile(filepath.Join(other, file))
			if err != nil {
				t.Fatal(err)
			}
			if err := os.WriteFile(filepath.Join(own, file), data, 0o644); err != nil {
				t.Fatal(err)
			}
			if file == fileGraph+".njs" {
				// The graph is read only when P is missing.
				if err := os.Remove(filepath.Join(own, fileP+".njs")); err != nil {
					t.Fatal(err)
				}
			}
			code, _, errs := runCLI("resume", own)
			if code != 0 || !strings.Contains(errs, "another run") {
				t.Fatalf("resume with a foreign %s: exit %d: %s", file, code, errs)
			}
			if got, _ := os.ReadFile(filepath.Join(own, fileEmbedding)); !bytes.Equal(got, want) {
				t.Errorf("the foreign %s changed the map", file)
			}
		})
	}
}

// TestBatchLog: with stderr a file, the log has no carriage returns (no bar
// frames) and every line starts with a timestamp.
func TestBatchLog(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 800)
	logPath := filepath.Join(dir, "job.log")
	f, err := os.Create(logPath)
	if err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(binary, "embed", "--input", in, "--run", filepath.Join(dir, "run"), "--steps", "200", "--early-steps", "50", "--score-sample", "300")
	cmd.Stderr = f
	if err := cmd.Run(); err != nil {
		t.Fatal(err)
	}
	f.Close()
	b, _ := os.ReadFile(logPath)
	if bytes.ContainsRune(b, '\r') {
		t.Errorf("the log has carriage returns")
	}
	stamp := regexp.MustCompile(`^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d(Z|[+-]\d\d:\d\d) `)
	lines := strings.Split(strings.TrimSpace(string(b)), "\n")
	for _, l := range lines {
		if !stamp.MatchString(l) {
			t.Errorf("log line without a timestamp: %q", l)
		}
	}
	if len(lines) < 6 || !strings.Contains(string(b), "optimising: started") {
		t.Errorf("the log misses phase lines:\n%s", b)
	}
	// --quiet keeps the phase summaries only.
	var qb bytes.Buffer
	q := exec.Command(binary, "embed", "--input", in, "--run", filepath.Join(dir, "quiet"), "--steps", "200", "--early-steps", "50", "--score-sample", "0", "--quiet")
	q.Stderr = &qb
	if err := q.Run(); err != nil {
		t.Fatal(err)
	}
	if strings.Contains(qb.String(), "started") || !strings.Contains(qb.String(), "optimised") {
		t.Errorf("--quiet log:\n%s", qb.String())
	}
}

// TestMisspeltOption: one line naming the nearest option, not the whole help.
func TestMisspeltOption(t *testing.T) {
	code, _, errs := runCLI("embed", "--perplxity", "20")
	if code != exitBadInput || strings.Count(errs, "\n") != 1 || !strings.Contains(errs, "--perplexity") || !strings.Contains(errs, "--help") {
		t.Errorf("exit %d, stderr %q", code, errs)
	}
	code, out, _ := runCLI("--version")
	if code != 0 || !strings.Contains(out, nightjar.Version) {
		t.Errorf("--version: %d %q", code, out)
	}
	var errb bytes.Buffer
	code = run(context.Background(), []string{"help", "embed"}, io.Discard, &errb, nil)
	help := errb.String()
	if code != 0 || !strings.Contains(help, "Required:") || strings.Index(help, "--input") > strings.Index(help, "--perplexity") {
		t.Errorf("help embed: exit %d, required options not first:\n%s", code, help)
	}
}

// TestFailedStartReplaced: a run that failed on bad input (a misspelt
// --id) does not block the corrected command, and status says what to do.
func TestFailedStartReplaced(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 300)
	runDir := filepath.Join(dir, "run")
	args := []string{"embed", "--input", in, "--run", runDir, "--steps", "60", "--early-steps", "20", "--score-sample", "0", "--quiet", "--label", "population"}
	if code, _, errs := runCLI(append(args, "--id", "identifier")...); code != exitBadInput || !strings.Contains(errs, "identifier") {
		t.Fatalf("misspelt --id: exit %d: %s", code, errs)
	}
	code, out, _ := runCLI("status", runDir)
	if code != 0 || !strings.Contains(out, "embed") || strings.Contains(out, "resume") {
		t.Errorf("status of a failed start:\n%s", out)
	}
	code, _, errs := runCLI(append(args, "--id", "id")...)
	if code != 0 || !strings.Contains(errs, "replacing") {
		t.Errorf("corrected embed: exit %d: %s", code, errs)
	}
}
