package checkpoint

import (
	"errors"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
)

// failAfter is a writer that accepts n bytes and then fails with err,
// simulating a disk that fills up during a write.
type failAfter struct {
	w   io.Writer
	n   int
	err error
}

func (f *failAfter) Write(p []byte) (int, error) {
	if len(p) <= f.n {
		f.n -= len(p)
		return f.w.Write(p)
	}
	k, _ := f.w.Write(p[:f.n])
	f.n = 0
	return k, f.err
}

// listDir returns the names in dir.
func listDir(t *testing.T, dir string) []string {
	t.Helper()
	es, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, e := range es {
		names = append(names, e.Name())
	}
	return names
}

// TestAtomicWriteFailures makes each step of AtomicWrite fail in turn and
// checks that the previous file survives unchanged, no temporary file is
// left, and the error says what happened. Hooks stand in for failures that
// root cannot meet on a normal disk (read-only directory, full disk).
func TestAtomicWriteFailures(t *testing.T) {
	enospc := &fs.PathError{Op: "write", Path: "x", Err: syscall.ENOSPC}
	tests := []struct {
		name    string
		setup   func()
		write   func(io.Writer) error
		wantIs  error
		wantMsg string
	}{
		{
			name: "writer func fails midway",
			write: func(w io.Writer) error {
				if _, err := io.WriteString(w, "half of the new"); err != nil {
					return err
				}
				return errors.New("encoder gave up")
			},
			wantMsg: "encoder gave up",
		},
		{
			name:    "disk full during write",
			setup:   func() { wrapWriter = func(w io.Writer) io.Writer { return &failAfter{w: w, n: 5, err: enospc} } },
			wantIs:  syscall.ENOSPC,
			wantMsg: "disk full (no space left on device)",
		},
		{
			name: "read-only directory",
			setup: func() {
				createTemp = func(string, string) (*os.File, error) {
					return nil, &fs.PathError{Op: "open", Path: "x", Err: syscall.EACCES}
				}
			},
			wantIs:  fs.ErrPermission,
			wantMsg: "permission denied",
		},
		{
			name:    "sync fails",
			setup:   func() { syncFile = func(*os.File) error { return syscall.EIO } },
			wantIs:  syscall.EIO,
			wantMsg: "syncing",
		},
		{
			name:    "rename fails",
			setup:   func() { renameFile = func(string, string) error { return syscall.EXDEV } },
			wantIs:  syscall.EXDEV,
			wantMsg: "writing",
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			t.Cleanup(resetHooks)
			dir := t.TempDir()
			path := filepath.Join(dir, "report.json")
			if err := os.WriteFile(path, []byte("old contents"), 0o644); err != nil {
				t.Fatal(err)
			}
			if tc.setup != nil {
				tc.setup()
			}
			write := tc.write
			if write == nil {
				write = func(w io.Writer) error { _, err := io.WriteString(w, "the new contents, longer"); return err }
			}
			err := AtomicWrite(path, write)
			if err == nil {
				t.Fatal("AtomicWrite succeeded")
			}
			if tc.wantIs != nil && !errors.Is(err, tc.wantIs) {
				t.Errorf("error %v is not %v", err, tc.wantIs)
			}
			if !strings.Contains(err.Error(), tc.wantMsg) || !strings.Contains(err.Error(), path) {
				t.Errorf("error %q should name %s and say %q", err, path, tc.wantMsg)
			}
			if b, err := os.ReadFile(path); err != nil || string(b) != "old contents" {
				t.Errorf("old file now %q, %v", b, err)
			}
			if names := listDir(t, dir); len(names) != 1 {
				t.Errorf("directory holds %v, want only report.json", names)
			}
		})
	}
}

func resetHooks() {
	createTemp = os.CreateTemp
	wrapWriter = func(w io.Writer) io.Writer { return w }
	syncFile = (*os.File).Sync
	renameFile = os.Rename
	syncDir = syncDirectory
}

// TestAtomicWriteRealFailure needs no hook: the parent "directory" is a
// regular file, which fails even for root.
func TestAtomicWriteRealFailure(t *testing.T) {
	dir := t.TempDir()
	notDir := filepath.Join(dir, "plain")
	if err := os.WriteFile(notDir, []byte("x"), 0o644); err != nil {
		t.Fatal(err)
	}
	err := AtomicWrite(filepath.Join(notDir, "map.png"), func(w io.Writer) error { return nil })
	if err == nil || !errors.Is(err, syscall.ENOTDIR) {
		t.Fatalf("got %v, want ENOTDIR", err)
	}
	if names := listDir(t, dir); len(names) != 1 {
		t.Errorf("directory holds %v", names)
	}
}

// TestAtomicWriteDiskFullStateFile runs the ENOSPC case through WriteFile,
// the path the optimiser states take, with a state big enough to need
// several writes.
func TestAtomicWriteDiskFullStateFile(t *testing.T) {
	t.Cleanup(resetHooks)
	dir := t.TempDir()
	path := filepath.Join(dir, "graph.njs")
	old := []Section{{Name: "indices", Data: Int32Bytes([]int32{1, 2, 3})}}
	if err := WriteFile(path, "graph", old); err != nil {
		t.Fatal(err)
	}
	wrapWriter = func(w io.Writer) io.Writer {
		return &failAfter{w: w, n: 3 << 20, err: &fs.PathError{Op: "write", Path: "x", Err: syscall.ENOSPC}}
	}
	big := []Section{{Name: "indices", Data: make([]byte, 8<<20)}}
	err := WriteFile(path, "graph", big)
	if !errors.Is(err, syscall.ENOSPC) || !strings.Contains(err.Error(), "disk full") {
		t.Fatalf("got %v", err)
	}
	secs, err := ReadFile(path, "graph")
	if err != nil || len(secs) != 1 || len(secs[0].Data) != 12 {
		t.Fatalf("old file damaged: %v %v", secs, err)
	}
	if names := listDir(t, dir); len(names) != 1 {
		t.Errorf("directory holds %v", names)
	}
}

func TestAtomicWriteReplaces(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "embedding.parquet")
	for _, content := range []string{"first", "second, longer", "3"} {
		if err := AtomicWrite(path, func(w io.Writer) error { _, err := io.WriteString(w, content); return err }); err != nil {
			t.Fatal(err)
		}
		b, err := os.ReadFile(path)
		if err != nil || string(b) != content {
			t.Fatalf("got %q %v, want %q", b, err, content)
		}
	}
	fi, err := os.Stat(path)
	if err != nil || fi.Mode().Perm() != 0o644 {
		t.Errorf("mode %v %v, want 0644", fi.Mode(), err)
	}
	if names := listDir(t, dir); len(names) != 1 {
		t.Errorf("directory holds %v", names)
	}
	// A relative path (no directory part) writes into the working directory.
	t.Chdir(dir)
	if err := AtomicWrite("rel.txt", func(w io.Writer) error { _, err := io.WriteString(w, "r"); return err }); err != nil {
		t.Fatal(err)
	}
	if b, err := os.ReadFile(filepath.Join(dir, "rel.txt")); err != nil || string(b) != "r" {
		t.Errorf("relative write: %q %v", b, err)
	}
}

func TestReadFileMissing(t *testing.T) {
	_, err := ReadFile(filepath.Join(t.TempDir(), "nope.njs"), "state")
	if !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("got %v, want ErrNotExist", err)
	}
}
