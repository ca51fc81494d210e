package main

import (
	"bytes"
	"errors"
	"io"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"nightjar"
	"nightjar/bench"
	"nightjar/checkpoint"
	"nightjar/ingest"
)

// placeFixture makes a finished reference run of 1,500 invented demo rows
// and a table of 10,000 further rows of the same survey (plumbing tests:
// invented data), and returns the reference directory and the table.
func placeFixture(t *testing.T) (ref, table string) {
	t.Helper()
	dir := t.TempDir()
	all := bench.Demo(11500, 5, 2)
	write := func(name string, lo, hi int) string {
		d := all.D
		tab := &ingest.Table{Matrix: nightjar.Matrix{N: hi - lo, D: d, Data: all.Data[lo*d : hi*d]}, Features: all.Features,
			ID: &ingest.Column{Name: "id", Ints: all.ID.Ints[lo:hi]}, Label: &ingest.Column{Name: "population", Strings: all.Label.Strings[lo:hi]}}
		path := filepath.Join(dir, name)
		if err := checkpoint.AtomicWrite(path, func(w io.Writer) error { return ingest.WriteTable(w, tab) }); err != nil {
			t.Fatal(err)
		}
		return path
	}
	refTable := write("ref.parquet", 0, 1500)
	table = write("new.parquet", 1500, 11500)
	ref = filepath.Join(dir, "ref")
	code, out, errs := runCLI("embed", "--input", refTable, "--run", ref, "--id", "id", "--label", "population",
		"--steps", "300", "--early-steps", "100", "--quiet", "--score-sample", "0")
	if code != 0 {
		t.Fatalf("reference run: exit %d\n%s\n%s", code, out, errs)
	}
	return ref, table
}

// TestPlaceAndMergeCLI places the new rows in one go and in four shards
// merged: the same placed.parquet bytes; the outputs are there; a merge
// with a part missing exits 2 naming it.
func TestPlaceAndMergeCLI(t *testing.T) {
	ref, table := placeFixture(t)
	dir := t.TempDir()
	whole := filepath.Join(dir, "whole")
	code, out, errs := runCLI("place", ref, "--input", table, "--out", whole, "--quiet", "--threads", "1")
	if code != 0 {
		t.Fatalf("place: exit %d\n%s\n%s", code, out, errs)
	}
	for _, want := range []string{"placed:", "map:", "page:", "report:", "voted label = own label", "caution:"} {
		if !strings.Contains(out, want) {
			t.Errorf("place output lacks %q:\n%s", want, out)
		}
	}
	for _, f := range []string{nightjar.FilePlaced, fileMap, fileReport} {
		if _, err := os.Stat(filepath.Join(whole, f)); err != nil {
			t.Error(err)
		}
	}
	sharded := filepath.Join(dir, "sharded")
	for i := range 4 {
		code, out, errs := runCLI("place", ref, "--input", table, "--out", sharded, "--shard", strconv.Itoa(i), "--shards", "4", "--quiet")
		if code != 0 || !strings.Contains(out, "nightjar merge") {
			t.Fatalf("shard %d: exit %d\n%s\n%s", i, code, out, errs)
		}
	}
	if code, out, errs := runCLI("merge", sharded, "--quiet"); code != 0 {
		t.Fatalf("merge: exit %d\n%s\n%s", code, out, errs)
	}
	a, _ := os.ReadFile(filepath.Join(whole, nightjar.FilePlaced))
	b, _ := os.ReadFile(filepath.Join(sharded, nightjar.FilePlaced))
	if len(a) == 0 || !bytes.Equal(a, b) {
		t.Fatal("the merged placed.parquet differs from the one placed in one go")
	}
	tab, err := ingest.Read(filepath.Join(sharded, "parts"), ingest.Options{Features: []string{"map_1", "map_2"}, ID: "id", Label: "population"})
	if err != nil || tab.N != 10000 {
		t.Errorf("the parts directory read as one table: %v; want 10,000 rows", err)
	}
	if err := os.Remove(filepath.Join(sharded, "parts", nightjar.PartName(1, 4))); err != nil {
		t.Fatal(err)
	}
	code, _, errs = runCLI("merge", sharded, "--quiet")
	if code != exitBadInput || !strings.Contains(errs, "shard(s) 1 of 4 are missing") {
		t.Errorf("merge without part 1: exit %d, %s", code, errs)
	}
}

// TestPlaceBadInputCLI: a new table without one of the reference's
// features, one with a feature the reference lacks, a reference that is not
// finished, and a missing reference exit 2 with one line saying so.
func TestPlaceBadInputCLI(t *testing.T) {
	ref, _ := placeFixture(t)
	dir := t.TempDir()
	all := bench.Demo(200, 5, 1)
	narrow := filepath.Join(dir, "narrow.csv")
	wide := filepath.Join(dir, "wide.csv")
	var nb, wb strings.Builder
	nb.WriteString(strings.Join(all.Features[:49], ",") + "\n")
	wb.WriteString(strings.Join(all.Features, ",") + ",f51\n")
	for i := range 200 {
		var cells []string
		for _, v := range all.Row(i) {
			cells = append(cells, strconv.FormatFloat(float64(v), 'g', -1, 32))
		}
		nb.WriteString(strings.Join(cells[:49], ",") + "\n")
		wb.WriteString(strings.Join(cells, ",") + ",1\n")
	}
	if err := os.WriteFile(narrow, []byte(nb.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(wide, []byte(wb.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	// A run stopped before it finished: its manifest says so.
	unfinished := filepath.Join(dir, "unfinished")
	if err := os.CopyFS(unfinished, os.DirFS(ref)); err != nil {
		t.Fatal(err)
	}
	os.Remove(filepath.Join(unfinished, checkpoint.LockName))
	run, err := checkpoint.Open(unfinished)
	if err != nil {
		t.Fatal(err)
	}
	m := run.Manifest()
	m.Phase, m.Status = checkpoint.PhaseOptimising, checkpoint.StatusInterrupted
	if err := run.SaveManifest(m); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		name, ref, input, want string
	}{
		{"missing column", ref, narrow, `column "f50": the reference's feature column is missing from the new table`},
		{"different width", ref, wide, `column "f51": is a feature of the new table but not one of the reference's 50 features`},
		{"unfinished reference", unfinished, narrow, "the reference run is not finished (status interrupted"},
		{"no reference", filepath.Join(dir, "nothing"), narrow, "not a usable reference"},
	} {
		code, _, errs := runCLI("place", tc.ref, "--input", tc.input, "--out", filepath.Join(dir, "out-"+strings.ReplaceAll(tc.name, " ", "-")), "--quiet")
		if code != exitBadInput || !strings.Contains(errs, tc.want) || strings.Count(strings.TrimSpace(errs), "\n") > 0 {
			t.Errorf("%s: exit %d, stderr %q; want exit 2 and one line saying %q", tc.name, code, errs, tc.want)
		}
	}
}

// TestPlaceKillResumeSameBits kills the real binary with SIGKILL during
// placements (at times drawn with a fixed seed), runs the same command again
// until it finishes, and checks that placed.parquet has the bits of an
// uninterrupted placement.
func TestPlaceKillResumeSameBits(t *testing.T) {
	ref, table := placeFixture(t)
	dir := t.TempDir()
	args := func(out string) []string {
		return []string{"place", ref, "--input", table, "--out", out, "--quiet", "--score-sample", "0"}
	}
	start := time.Now()
	if out, err := exec.Command(binary, args(filepath.Join(dir, "whole"))...).CombinedOutput(); err != nil {
		t.Fatalf("uninterrupted placement: %v\n%s", err, out)
	}
	took := time.Since(start)
	want, err := os.ReadFile(filepath.Join(dir, "whole", nightjar.FilePlaced))
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(14, 2))
	kills := 0
	for run := range 3 {
		out := filepath.Join(dir, "killed"+strconv.Itoa(run))
		for attempt := 0; ; attempt++ {
			if attempt > 30 {
				t.Fatalf("placement %d did not finish after %d attempts", run, attempt)
			}
			cmd := exec.Command(binary, args(out)...)
			var stderr bytes.Buffer
			cmd.Stderr = &stderr
			if err := cmd.Start(); err != nil {
				t.Fatal(err)
			}
			exited := make(chan error, 1)
			go func() { exited <- cmd.Wait() }()
			var err error
			select {
			case err = <-exited:
			case <-time.After(time.Duration(rng.Float64() * float64(took))):
				_ = cmd.Process.Signal(syscall.SIGKILL)
				err = <-exited
				var ee *exec.ExitError
				if errors.As(err, &ee) && !ee.Exited() {
					kills++
					continue
				}
			}
			if err != nil {
				t.Fatalf("placement %d attempt %d failed: %v\n%s", run, attempt, err, stderr.String())
			}
			break
		}
		got, err := os.ReadFile(filepath.Join(out, nightjar.FilePlaced))
		if err != nil || !bytes.Equal(got, want) {
			t.Errorf("placement %d: placed.parquet differs from the uninterrupted one (%v)", run, err)
		}
	}
	t.Logf("%d SIGKILLs; every placement finished with the uninterrupted bits", kills)
}

// TestPlaceTermResumes: SIGTERM stops a placement with exit 143 and a hint
// to resume; 'nightjar resume DIR' finishes it with the uninterrupted bits.
func TestPlaceTermResumes(t *testing.T) {
	ref, table := placeFixture(t)
	dir := t.TempDir()
	whole, cut := filepath.Join(dir, "whole"), filepath.Join(dir, "cut")
	if code, out, errs := runCLI("place", ref, "--input", table, "--out", whole, "--quiet"); code != 0 {
		t.Fatalf("place: exit %d\n%s\n%s", code, out, errs)
	}
	cmd := exec.Command(binary, "place", ref, "--input", table, "--out", cut, "--quiet")
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	// Wait for the first saved chunk, then stop the process.
	deadline := time.Now().Add(2 * time.Minute)
	for time.Now().Before(deadline) {
		if ents, _ := os.ReadDir(filepath.Join(cut, "chunks")); len(ents) > 0 {
			break
		}
		time.Sleep(20 * time.Millisecond)
	}
	_ = cmd.Process.Signal(syscall.SIGTERM)
	err := cmd.Wait()
	var ee *exec.ExitError
	if err == nil {
		t.Skip("the placement finished before SIGTERM arrived")
	}
	if !errors.As(err, &ee) || ee.ExitCode() != exitTerm || !strings.Contains(stderr.String(), "nightjar resume "+cut) {
		t.Fatalf("after SIGTERM: %v, stderr %q; want exit 143 and a resume hint", err, stderr.String())
	}
	if code, out, errs := runCLI("resume", cut, "--quiet"); code != 0 || !strings.Contains(out, "placed:") {
		t.Fatalf("resume: exit %d\n%s\n%s", code, out, errs)
	}
	a, _ := os.ReadFile(filepath.Join(whole, nightjar.FilePlaced))
	b, _ := os.ReadFile(filepath.Join(cut, nightjar.FilePlaced))
	if len(a) == 0 || !bytes.Equal(a, b) {
		t.Error("the resumed placement differs from the uninterrupted one")
	}
}
