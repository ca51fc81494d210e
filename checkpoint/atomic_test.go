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

// errStop is what a faultFS panics with to stop a write the way a kill
// would: nothing after the step runs, deferred clean-up included (the
// temporary file is left behind).
var errStop = errors.New("stopped")

// faultFS is the real file system with faults injected: fail is called
// before every operation (CreateTemp, each Write, Chmod, Sync, Close,
// Rename, Remove, SyncDir) with its name and the number of operations
// before it; a non-nil error is returned instead of doing the operation.
// wrap, when set, wraps the writer of every temporary file.
type faultFS struct {
	OSFS
	fail  func(op string, step int) error
	wrap  func(io.Writer) io.Writer
	steps int
}

func (f *faultFS) check(op string) error {
	step := f.steps
	f.steps++
	if f.fail == nil {
		return nil
	}
	return f.fail(op, step)
}

func (f *faultFS) CreateTemp(dir, pattern string) (File, error) {
	if err := f.check("create"); err != nil {
		return nil, err
	}
	file, err := f.OSFS.CreateTemp(dir, pattern)
	if err != nil {
		return nil, err
	}
	ff := &faultFile{File: file, fs: f, w: file}
	if f.wrap != nil {
		ff.w = f.wrap(file)
	}
	return ff, nil
}

func (f *faultFS) Rename(from, to string) error {
	if err := f.check("rename"); err != nil {
		return err
	}
	return f.OSFS.Rename(from, to)
}

func (f *faultFS) Remove(name string) error {
	if err := f.check("remove"); err != nil {
		return err
	}
	return f.OSFS.Remove(name)
}

func (f *faultFS) SyncDir(dir string) error {
	if err := f.check("syncdir"); err != nil {
		return err
	}
	return f.OSFS.SyncDir(dir)
}

type faultFile struct {
	File
	fs *faultFS
	w  io.Writer
}

func (f *faultFile) Write(p []byte) (int, error) {
	if err := f.fs.check("write"); err != nil {
		return 0, err
	}
	return f.w.Write(p)
}

func (f *faultFile) Chmod(mode fs.FileMode) error {
	if err := f.fs.check("chmod"); err != nil {
		return err
	}
	return f.File.Chmod(mode)
}

func (f *faultFile) Sync() error {
	if err := f.fs.check("sync"); err != nil {
		return err
	}
	return f.File.Sync()
}

func (f *faultFile) Close() error {
	if err := f.fs.check("close"); err != nil {
		return err
	}
	return f.File.Close()
}

// failOn returns a fail function giving err for every operation op.
func failOn(op string, err error) func(string, int) error {
	return func(o string, _ int) error {
		if o == op {
			return err
		}
		return nil
	}
}

// stopAt returns a fail function that stops (panics with errStop) at the
// given step.
func stopAt(step int) func(string, int) error {
	return func(_ string, s int) error {
		if s == step {
			panic(errStop)
		}
		return nil
	}
}

// stopped runs f and reports whether a faultFS stopped it.
func stopped(f func()) (stop bool) {
	defer func() {
		if r := recover(); r != nil {
			if r != errStop {
				panic(r)
			}
			stop = true
		}
	}()
	f()
	return false
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
// left, and the error says what happened. A faultFS stands in for failures
// that root cannot meet on a normal disk (read-only directory, full disk).
func TestAtomicWriteFailures(t *testing.T) {
	enospc := &fs.PathError{Op: "write", Path: "x", Err: syscall.ENOSPC}
	tests := []struct {
		name    string
		fsys    *faultFS
		write   func(io.Writer) error
		wantIs  error
		wantMsg string
	}{
		{
			name: "writer func fails midway",
			fsys: &faultFS{},
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
			fsys:    &faultFS{wrap: func(w io.Writer) io.Writer { return &failAfter{w: w, n: 5, err: enospc} }},
			wantIs:  syscall.ENOSPC,
			wantMsg: "disk full (no space left on device)",
		},
		{
			name:    "read-only directory",
			fsys:    &faultFS{fail: failOn("create", &fs.PathError{Op: "open", Path: "x", Err: syscall.EACCES})},
			wantIs:  fs.ErrPermission,
			wantMsg: "permission denied",
		},
		{
			name:    "chmod fails",
			fsys:    &faultFS{fail: failOn("chmod", syscall.EPERM)},
			wantIs:  syscall.EPERM,
			wantMsg: "writing",
		},
		{
			name:    "sync fails",
			fsys:    &faultFS{fail: failOn("sync", syscall.EIO)},
			wantIs:  syscall.EIO,
			wantMsg: "syncing",
		},
		{
			name:    "rename fails",
			fsys:    &faultFS{fail: failOn("rename", syscall.EXDEV)},
			wantIs:  syscall.EXDEV,
			wantMsg: "writing",
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			path := filepath.Join(dir, "report.json")
			if err := os.WriteFile(path, []byte("old contents"), 0o644); err != nil {
				t.Fatal(err)
			}
			write := tc.write
			if write == nil {
				write = func(w io.Writer) error { _, err := io.WriteString(w, "the new contents, longer"); return err }
			}
			err := AtomicWriteFS(tc.fsys, path, write)
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

// TestAtomicWriteDirSyncFails: once the rename is done the new file stays,
// and the error says that only the directory sync failed.
func TestAtomicWriteDirSyncFails(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "map.png")
	err := AtomicWriteFS(&faultFS{fail: failOn("syncdir", syscall.EIO)}, path, func(w io.Writer) error {
		_, err := io.WriteString(w, "new")
		return err
	})
	if !errors.Is(err, syscall.EIO) || !strings.Contains(err.Error(), "directory sync failed") {
		t.Fatalf("got %v", err)
	}
	if b, err := os.ReadFile(path); err != nil || string(b) != "new" {
		t.Errorf("file %q, %v; want the new contents", b, err)
	}
}

// TestAtomicWriteStopsAtEachStep stops the write at every step in turn, as a
// kill would (no clean-up runs), and checks the promise of AtomicWrite: the
// file holds all of its old or all of its new contents, and anything else
// in the directory is a temporary file, which Open removes.
func TestAtomicWriteStopsAtEachStep(t *testing.T) {
	const oldText, newText = "old contents", "the new contents, in three writes"
	for step := 0; ; step++ {
		dir := t.TempDir()
		path := filepath.Join(dir, "report.json")
		if err := os.WriteFile(path, []byte(oldText), 0o644); err != nil {
			t.Fatal(err)
		}
		var err error
		stop := stopped(func() {
			err = AtomicWriteFS(&faultFS{fail: stopAt(step)}, path, func(w io.Writer) error {
				for _, part := range []string{newText[:7], newText[7:20], newText[20:]} {
					if _, err := io.WriteString(w, part); err != nil {
						return err
					}
				}
				return nil
			})
		})
		b, rerr := os.ReadFile(path)
		if rerr != nil || string(b) != oldText && string(b) != newText {
			t.Fatalf("stopped at step %d: file holds %q, %v", step, b, rerr)
		}
		for _, name := range listDir(t, dir) {
			if name != "report.json" && !isTempName(name) {
				t.Errorf("stopped at step %d: unexpected file %s", step, name)
			}
		}
		if !stop {
			if err != nil || string(b) != newText {
				t.Fatalf("write not stopped: %v, file %q", err, b)
			}
			if step != 9 { // create, 3 writes, chmod, sync, close, rename, sync dir
				t.Errorf("the write took %d steps, want 9", step)
			}
			return
		}
	}
}

// TestAtomicWriteRealFailure needs no faultFS: the parent "directory" is a
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
	dir := t.TempDir()
	path := filepath.Join(dir, "graph.njs")
	old := []Section{{Name: "indices", Data: EncodeValues([]int32{1, 2, 3})}}
	if err := WriteFile(path, "graph", old); err != nil {
		t.Fatal(err)
	}
	fsys := &faultFS{wrap: func(w io.Writer) io.Writer {
		return &failAfter{w: w, n: 3 << 20, err: &fs.PathError{Op: "write", Path: "x", Err: syscall.ENOSPC}}
	}}
	big := []Section{{Name: "indices", Data: make([]byte, 8<<20)}}
	err := writeFile(fsys, path, "graph", big)
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
