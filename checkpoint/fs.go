package checkpoint

import (
	"errors"
	"io"
	"io/fs"
	"os"
	"syscall"
)

// FS is the file system a run writes through: the operations AtomicWriteFS
// needs, and the removal of old states. OSFS is the real one. Tests supply
// another (usually embedding OSFS) to make a step fail as a full or
// read-only disk would, or to stop the process at a step as a kill would.
type FS interface {
	// CreateTemp creates and opens a new file in dir, its name being pattern
	// with the last "*" replaced by a random string, as os.CreateTemp does.
	CreateTemp(dir, pattern string) (File, error)
	// Rename moves oldpath to newpath, replacing newpath, as os.Rename does.
	Rename(oldpath, newpath string) error
	// Remove removes the named file, as os.Remove does.
	Remove(name string) error
	// SyncDir makes the renames and removals done in dir durable.
	SyncDir(dir string) error
}

// File is a file opened by FS.CreateTemp. *os.File implements it.
type File interface {
	io.Writer
	// Name returns the path the file was created under.
	Name() string
	Chmod(mode fs.FileMode) error
	// Sync commits the file's contents to stable storage.
	Sync() error
	Close() error
}

// OSFS is the operating system's file system, the default of AtomicWrite,
// WriteFile and Run.
type OSFS struct{}

// CreateTemp calls os.CreateTemp.
func (OSFS) CreateTemp(dir, pattern string) (File, error) {
	f, err := os.CreateTemp(dir, pattern)
	if err != nil {
		return nil, err // not a typed nil *os.File inside a File
	}
	return f, nil
}

// Rename calls os.Rename.
func (OSFS) Rename(oldpath, newpath string) error { return os.Rename(oldpath, newpath) }

// Remove calls os.Remove.
func (OSFS) Remove(name string) error { return os.Remove(name) }

// SyncDir opens dir and syncs it. File systems that cannot sync a directory
// (EINVAL, ENOTSUP) are tolerated: there is nothing more to do.
func (OSFS) SyncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	err = d.Sync()
	cerr := d.Close()
	if err != nil && !errors.Is(err, syscall.EINVAL) && !errors.Is(err, syscall.ENOTSUP) {
		return err
	}
	return cerr
}
