package checkpoint

import (
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"syscall"
)

// Hooks that tests replace to simulate failures the test machine cannot
// produce (tests run as root, where a read-only directory still accepts
// writes, and a full disk cannot be arranged without mounting one).
var (
	createTemp = os.CreateTemp
	wrapWriter = func(w io.Writer) io.Writer { return w }
	syncFile   = (*os.File).Sync
	renameFile = os.Rename
	syncDir    = syncDirectory
)

// tempMarker appears in the names of temporary files, which are
// "." + final name + tempMarker + random digits.
const tempMarker = ".tmp-"

// AtomicWrite replaces the file at path with the bytes write produces, so
// that at any moment (including after a crash or kill) path holds either its
// old contents or all of the new ones. It writes to a temporary file in the
// same directory, syncs it, renames it over path and syncs the directory.
// On any error the temporary file is removed and the old file is left as it
// was. A full disk gives an error saying so (errors.Is(err, syscall.ENOSPC)
// holds). The new file gets mode 0644 (the umask is not applied).
// write must not keep the writer after it returns.
func AtomicWrite(path string, write func(io.Writer) error) (err error) {
	dir, base := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	if base == "" {
		return fmt.Errorf("writing %q: not a file name", path)
	}
	f, err := createTemp(dir, "."+base+tempMarker+"*")
	if err != nil {
		return writeError(path, err)
	}
	tmp := f.Name()
	defer func() {
		if err != nil {
			f.Close() // may already be closed; the error is irrelevant then
			os.Remove(tmp)
		}
	}()
	if err = write(wrapWriter(f)); err != nil {
		return writeError(path, err)
	}
	if err = f.Chmod(0o644); err != nil {
		return writeError(path, err)
	}
	if err = syncFile(f); err != nil {
		return writeError(path, fmt.Errorf("syncing: %w", err))
	}
	if err = f.Close(); err != nil {
		return writeError(path, err)
	}
	if err = renameFile(tmp, path); err != nil {
		return writeError(path, err)
	}
	// The new file is in place; from here on there is no temporary to remove.
	if derr := syncDir(dir); derr != nil {
		return fmt.Errorf("writing %s: file renamed but directory sync failed: %w", path, derr)
	}
	return nil
}

func writeError(path string, err error) error {
	if errors.Is(err, syscall.ENOSPC) {
		return fmt.Errorf("writing %s: disk full (no space left on device); free space or use a run directory on another disk: %w", path, err)
	}
	if errors.Is(err, syscall.EDQUOT) {
		return fmt.Errorf("writing %s: disk quota exceeded: %w", path, err)
	}
	return fmt.Errorf("writing %s: %w", path, err)
}

// syncDirectory makes a rename in dir durable. File systems that cannot sync
// a directory (EINVAL, ENOTSUP) are tolerated: there is nothing more to do.
func syncDirectory(dir string) error {
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

// isTempName reports whether a directory entry is a temporary file left by
// AtomicWrite (for instance after a kill).
func isTempName(name string) bool {
	return strings.HasPrefix(name, ".") && strings.Contains(name, tempMarker)
}

// WriteFile atomically writes a state file of the given kind to path (see
// Encode for the rules on kind and section names, AtomicWrite for the
// guarantees).
func WriteFile(path, kind string, sections []Section) error {
	return AtomicWrite(path, func(w io.Writer) error {
		return bufferedEncode(w, kind, sections)
	})
}

// ReadFile reads and decodes the state file at path, which must be of the
// given kind. Decoding errors are the typed errors of Decode with File set to
// path; a missing file gives an error satisfying errors.Is(err, fs.ErrNotExist).
// The whole file is read into memory; sections alias that buffer.
func ReadFile(path, kind string) ([]Section, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("reading state file: %w", err)
	}
	sections, err := Decode(data, kind)
	if err != nil {
		return nil, setFile(err, path)
	}
	return sections, nil
}
