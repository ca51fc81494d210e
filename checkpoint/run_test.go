package checkpoint

import (
	"errors"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
)

func stateSections(it int) []Section {
	return []Section{
		{Name: "embedding", Data: EncodeValues([]float64{float64(it), -float64(it), 0.5})},
		{Name: "gains", Data: EncodeValues([]float64{1, 1, 1})},
	}
}

func stateFiles(t *testing.T, dir string) []string {
	t.Helper()
	var out []string
	for _, n := range listDir(t, dir) {
		if strings.HasPrefix(n, "state-") {
			out = append(out, n)
		}
	}
	return out
}

func TestCreateOpen(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "runs", "a")
	r, err := Create(dir)
	if err != nil {
		t.Fatal(err)
	}
	if m := r.Manifest(); m.Phase != PhaseCreated || m.Status != StatusRunning || m.Started.IsZero() || len(m.RunID) != 16 {
		t.Errorf("first manifest %+v", m)
	}
	if names := listDir(t, dir); len(names) != 0 {
		t.Errorf("Create wrote %v before the manifest was complete", names)
	}
	if err := r.SaveManifest(r.Manifest()); err != nil {
		t.Fatal(err)
	}
	_, err = Create(dir)
	if err == nil || !strings.Contains(err.Error(), "already holds a run") || !strings.Contains(err.Error(), "resume") {
		t.Errorf("second Create: %v", err)
	}
	m := r.Manifest()
	m.Phase, m.Iterations = PhaseNeighbours, 1000
	if err := r.SaveManifest(m); err != nil {
		t.Fatal(err)
	}
	bad := *m
	bad.Phase = "dreaming"
	if err := r.SaveManifest(&bad); err == nil {
		t.Error("invalid manifest saved")
	}
	// A temporary file left by a killed write is left alone by Open (it
	// may be another process's write in progress) and cleared by
	// RemoveTemporaries, which only the lock holder calls.
	if err := os.WriteFile(filepath.Join(dir, ".state-000000010.njs.tmp-123"), []byte("x"), 0o600); err != nil {
		t.Fatal(err)
	}
	r2, err := Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	if r2.Manifest().Phase != PhaseNeighbours || r2.Manifest().Iterations != 1000 {
		t.Errorf("reopened manifest %+v", r2.Manifest())
	}
	if names := listDir(t, dir); !slices.Contains(names, ".state-000000010.njs.tmp-123") {
		t.Errorf("Open removed a temporary: %v", names)
	}
	if err := r2.RemoveTemporaries(); err != nil {
		t.Fatal(err)
	}
	if names := listDir(t, dir); !slices.Equal(names, []string{ManifestName, PrevManifestName}) {
		t.Errorf("directory holds %v", names)
	}
	if _, err := Open(t.TempDir()); err == nil || !strings.Contains(err.Error(), "not a run directory") || !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("Open of empty dir: %v", err)
	}
}

func TestSaveStateKeepsTwo(t *testing.T) {
	r := newRun(t)
	if _, _, _, err := r.LoadState(); !errors.Is(err, ErrNoState) {
		t.Errorf("LoadState before any save: %v", err)
	}
	for _, it := range []int{0, 50, 100, 150} {
		if err := r.SaveState(it, stateSections(it)); err != nil {
			t.Fatal(err)
		}
	}
	want := []string{"state-000000100.njs", "state-000000150.njs"}
	if got := stateFiles(t, r.Dir); !slices.Equal(got, want) {
		t.Errorf("state files %v, want %v", got, want)
	}
	it, secs, warns, err := r.LoadState()
	if err != nil || it != 150 || len(warns) != 0 {
		t.Fatalf("LoadState = %d, %v, %v", it, warns, err)
	}
	emb, err := Lookup(secs, "embedding")
	if err != nil {
		t.Fatal(err)
	}
	if v, _ := DecodeValues[float64](emb); !slices.Equal(v, []float64{150, -150, 0.5}) {
		t.Errorf("embedding %v", v)
	}
	if len(secs) != 2 {
		t.Errorf("LoadState returned %d sections, want the 2 saved", len(secs))
	}
	if err := r.SaveState(200, []Section{{Name: "checkpoint.x"}}); err == nil {
		t.Error("reserved section name accepted")
	}
	// Resuming from 100 and saving 125 drops the abandoned 150.
	if err := r.SaveState(125, stateSections(125)); err != nil {
		t.Fatal(err)
	}
	want = []string{"state-000000100.njs", "state-000000125.njs"}
	if got := stateFiles(t, r.Dir); !slices.Equal(got, want) {
		t.Errorf("after resume, state files %v, want %v", got, want)
	}
}

// TestSaveStateStopsAtEachStep stops SaveState at every file-system step in
// turn, as a kill would, through Run.FS. After reopening (which clears
// temporary files) LoadState must give the previous state or the new one,
// intact, without warnings.
func TestSaveStateStopsAtEachStep(t *testing.T) {
	for step := 0; ; step++ {
		r, err := CreateFS(t.TempDir(), &faultFS{})
		if err != nil {
			t.Fatal(err)
		}
		if err := r.SaveManifest(r.Manifest()); err != nil {
			t.Fatal(err)
		}
		for _, it := range []int{10, 20} {
			if err := r.SaveState(it, stateSections(it)); err != nil {
				t.Fatal(err)
			}
		}
		r.FS = &faultFS{fail: stopAt(step)}
		stop := stopped(func() {
			if err := r.SaveState(30, stateSections(30)); err != nil {
				t.Fatal(err)
			}
		})
		again, err := Open(r.Dir)
		if err != nil {
			t.Fatal(err)
		}
		it, secs, warns, err := again.LoadState()
		if err != nil || len(warns) != 0 || it != 20 && it != 30 {
			t.Fatalf("stopped at step %d: LoadState = %d, %v, %v", step, it, warns, err)
		}
		if v, err := SectionValues[float64](secs, "embedding"); err != nil || v[0] != float64(it) {
			t.Fatalf("stopped at step %d: embedding %v, %v", step, v, err)
		}
		if !stop {
			if it != 30 || step != 8 { // create, one buffered write, chmod, sync, close, rename, sync dir, remove of state 10
				t.Errorf("SaveState finished after %d steps with state %d", step, it)
			}
			return
		}
	}
}

// TestLoadStateFallback damages the newest state in several ways; LoadState
// must return the previous one with a warning naming file and section.
func TestLoadStateFallback(t *testing.T) {
	tests := []struct {
		name    string
		damage  func(b []byte) []byte
		section string
		reason  string
	}{
		{"truncated in gains", func(b []byte) []byte { return b[:len(b)-20] }, "gains", "truncated"},
		{"bit flip in embedding", func(b []byte) []byte {
			i := len(b) - 8 - 24 - 24 + 3 // embedding, gains (24 bytes each), iteration (8)
			b[i] ^= 0x10
			return b
		}, "embedding", "checksum mismatch"},
		{"header flip", func(b []byte) []byte { b[14] ^= 1; return b }, "", "header checksum mismatch"},
		{"empty file", func(b []byte) []byte { return nil }, "", "truncated"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r := newRun(t)
			for _, it := range []int{250, 500} {
				if err := r.SaveState(it, stateSections(it)); err != nil {
					t.Fatal(err)
				}
			}
			newest := r.Path("state-000000500.njs")
			b, err := os.ReadFile(newest)
			if err != nil {
				t.Fatal(err)
			}
			if err := os.WriteFile(newest, tc.damage(b), 0o644); err != nil {
				t.Fatal(err)
			}
			it, secs, warns, err := r.LoadState()
			if err != nil || it != 250 {
				t.Fatalf("LoadState = %d, %v", it, err)
			}
			if emb, _ := Lookup(secs, "embedding"); emb == nil {
				t.Error("no embedding in fallback state")
			}
			if len(warns) != 1 {
				t.Fatalf("warnings %v", warns)
			}
			var ce *CorruptError
			if !errors.As(warns[0], &ce) || ce.File != newest || ce.Section != tc.section || !strings.Contains(ce.Reason, tc.reason) {
				t.Errorf("warning %v; want file %s section %q reason %q", warns[0], newest, tc.section, tc.reason)
			}
			if !strings.Contains(warns[0].Error(), "state-000000500.njs") {
				t.Errorf("warning %q does not name the file", warns[0])
			}
		})
	}
}

func TestLoadStateAllBad(t *testing.T) {
	r := newRun(t)
	for _, it := range []int{1, 2} {
		if err := os.WriteFile(r.Path(stateName(it)), []byte("garbage"), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	_, _, warns, err := r.LoadState()
	if err == nil || len(warns) != 2 || errors.Is(err, ErrNoState) {
		t.Fatalf("got %v, %v", warns, err)
	}
	if !strings.Contains(err.Error(), "state-000000002.njs") || !strings.Contains(err.Error(), "state-000000001.njs") {
		t.Errorf("error %q should name both files", err)
	}
	var me *MagicError
	if strings.Contains(err.Error(), "\n") || !errors.As(err, &me) {
		t.Errorf("error %q should be one line wrapping *MagicError", err)
	}
}

// TestLoadStateRenamed refuses a state whose contents belong to another
// iteration than its name says (a hand-copied file).
func TestLoadStateRenamed(t *testing.T) {
	r := newRun(t)
	if err := r.SaveState(10, stateSections(10)); err != nil {
		t.Fatal(err)
	}
	if err := r.SaveState(20, stateSections(20)); err != nil {
		t.Fatal(err)
	}
	if err := os.Rename(r.Path(stateName(20)), r.Path(stateName(30))); err != nil {
		t.Fatal(err)
	}
	it, _, warns, err := r.LoadState()
	if err != nil || it != 10 || len(warns) != 1 || !strings.Contains(warns[0].Error(), iterationSection) {
		t.Errorf("LoadState = %d, %v, %v", it, warns, err)
	}
}

func TestParseStateName(t *testing.T) {
	tests := []struct {
		name string
		it   int
		ok   bool
	}{
		{"state-000000250.njs", 250, true},
		{"state-000000000.njs", 0, true},
		{"state-999999999.njs", 999999999, true},
		{"state-250.njs", 0, false},
		{"state-0000002500.njs", 0, false},
		{"state-00000025a.njs", 0, false},
		{"state-000000250.njs.tmp-1", 0, false},
		{".state-000000250.njs.tmp-1", 0, false},
		{"state-+00000250.njs", 0, false},
	}
	for _, tc := range tests {
		it, ok := parseStateName(tc.name)
		if it != tc.it || ok != tc.ok {
			t.Errorf("%s: %d %v, want %d %v", tc.name, it, ok, tc.it, tc.ok)
		}
	}
}

func TestArtifacts(t *testing.T) {
	r := newRun(t)
	graph := []Section{
		{Name: "indices", Data: EncodeValues([]int32{1, 0, 0, 1})},
		{Name: "distances", Data: EncodeValues([]float32{0.5, 0.5, 1, 1})},
	}
	if err := r.SaveArtifact("graph", "graph", graph); err != nil {
		t.Fatal(err)
	}
	got, err := r.LoadArtifact("graph", "graph")
	if err != nil || len(got) != 2 || got[1].Name != "distances" {
		t.Fatalf("LoadArtifact = %v, %v", got, err)
	}
	var ke *KindError
	if _, err := r.LoadArtifact("graph", "affinity"); !errors.As(err, &ke) {
		t.Errorf("wrong kind: %v", err)
	}
	if _, err := r.LoadArtifact("affinities", "affinity"); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("missing artifact: %v", err)
	}
	for _, bad := range []string{"", "../graph", "a/b", ".hidden", "state-1", ManifestName} {
		if err := r.SaveArtifact(bad, "graph", graph); err == nil {
			t.Errorf("artifact name %q accepted", bad)
		}
	}
}

// newRun creates a run in a temporary directory and writes its manifest.
func newRun(t *testing.T) *Run {
	t.Helper()
	r, err := Create(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	if err := r.SaveManifest(r.Manifest()); err != nil {
		t.Fatal(err)
	}
	return r
}
