package checkpoint

import (
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

func TestLockOneWriter(t *testing.T) {
	dir := t.TempDir()
	l, err := AcquireLock(dir)
	if err != nil {
		t.Fatal(err)
	}
	if held, h, ok := Probe(dir); !held || !ok || h.PID != os.Getpid() {
		t.Errorf("Probe of a held lock = %v %+v %v", held, h, ok)
	}
	// A second writer in the same process opens its own file description,
	// so flock refuses it as it would another process.
	_, err = AcquireLock(dir)
	var he *HeldError
	if !errors.As(err, &he) || he.Holder.PID != os.Getpid() || !strings.Contains(err.Error(), "pid") {
		t.Fatalf("second AcquireLock: %v", err)
	}
	l.Release()
	if held, _, _ := Probe(dir); held {
		t.Error("Probe after Release says held")
	}
	l2, err := AcquireLock(dir)
	if err != nil {
		t.Fatalf("AcquireLock after Release: %v", err)
	}
	l2.Release()
}

// TestLockRefusesAtOnce: a writer meeting a live holder is refused at once,
// not after the holder ends (a short run could end within the retries meant
// for a reader's probe, and the second writer would then take the lock).
func TestLockRefusesAtOnce(t *testing.T) {
	dir := t.TempDir()
	l, err := AcquireLock(dir)
	if err != nil {
		t.Fatal(err)
	}
	released := make(chan struct{})
	go func() {
		time.Sleep(lockTries * lockWait / 2)
		l.Release()
		close(released)
	}()
	l2, err := AcquireLock(dir)
	var he *HeldError
	if !errors.As(err, &he) || !he.Known || he.Holder.PID != os.Getpid() {
		t.Errorf("AcquireLock while held = %v, want a HeldError naming this process", err)
	}
	if l2 != nil {
		l2.Release()
	}
	<-released
}

// TestLockRecords: a record left by a dead process on this host is taken
// over; a fresh record of another host counts as alive (flock may not reach
// across nodes), a stale one does not.
func TestLockRecords(t *testing.T) {
	write := func(dir string, h Holder) {
		b, _ := json.Marshal(h)
		if err := os.WriteFile(filepath.Join(dir, HolderName), b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	now := time.Now().UTC()
	cases := []struct {
		name  string
		h     Holder
		taken bool
	}{
		{"dead pid here", Holder{Host: hostname(), PID: 1 << 22, Since: now, Heartbeat: now}, true},
		{"fresh elsewhere", Holder{Host: "other-node", PID: 42, Since: now, Heartbeat: now}, false},
		{"stale elsewhere", Holder{Host: "other-node", PID: 42, Since: now.Add(-time.Hour), Heartbeat: now.Add(-StaleAfter - time.Minute)}, true},
	}
	for _, c := range cases {
		dir := t.TempDir()
		write(dir, c.h)
		held, _, _ := Probe(dir)
		if held == c.taken {
			t.Errorf("%s: Probe says held = %v", c.name, held)
		}
		l, err := AcquireLock(dir)
		if c.taken != (err == nil) {
			t.Errorf("%s: AcquireLock = %v", c.name, err)
		}
		if l != nil {
			l.Release()
		}
	}
}

// TestOpenFallsBack: a manifest changed outside nightjar (checksum) or
// damaged is never used; the copy saved before the last change is, with a
// warning; with no valid copy, Open refuses and says what to do.
func TestOpenFallsBack(t *testing.T) {
	r := newRun(t)
	m := r.Manifest()
	m.Iterations, m.Phase = 1000, PhaseNeighbours
	if err := r.SaveManifest(m); err != nil {
		t.Fatal(err)
	}
	b, _ := os.ReadFile(r.Path(ManifestName))
	tampered := strings.Replace(string(b), `"iterations": 1000`, `"iterations": 2000`, 1)
	if err := os.WriteFile(r.Path(ManifestName), []byte(tampered), 0o644); err != nil {
		t.Fatal(err)
	}
	r2, err := Open(r.Dir)
	if err != nil || !strings.Contains(r2.Fallback, "outside nightjar") || r2.Manifest().Iterations == 2000 {
		t.Fatalf("Open of a tampered manifest: %v, fallback %q", err, r2.Fallback)
	}
	if err := os.WriteFile(r.Path(PrevManifestName), []byte("{"), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := Open(r.Dir); err == nil || !strings.Contains(err.Error(), "restore") {
		t.Errorf("Open with no valid copy: %v", err)
	}
}

// TestForeignFilesRefused: a graph or state copied from another run is
// refused on load, even with the same shape.
func TestForeignFilesRefused(t *testing.T) {
	a, b := newRun(t), newRun(t)
	secs := []Section{{Name: "x", Data: []byte("1234")}}
	if err := a.SaveArtifact("graph", "graph", secs); err != nil {
		t.Fatal(err)
	}
	if err := a.SaveState(10, secs); err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{"graph" + Extension, "state-000000010" + Extension} {
		data, _ := os.ReadFile(a.Path(name))
		if err := os.WriteFile(b.Path(name), data, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	var fe *ForeignError
	if got, err := a.LoadArtifact("graph", "graph"); err != nil || len(got) != 1 {
		t.Errorf("own graph: %v %v", got, err)
	}
	if _, err := b.LoadArtifact("graph", "graph"); !errors.As(err, &fe) {
		t.Errorf("foreign graph: %v", err)
	}
	if _, _, warns, err := b.LoadState(); err == nil || len(warns) != 1 || !errors.As(warns[0], &fe) {
		t.Errorf("foreign state: %v %v", warns, err)
	}
}
