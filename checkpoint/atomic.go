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
func AtomicWrite(path string, write func(io.Writer) error) error {
	return AtomicWriteFS(OSFS{}, path, write)
}

// AtomicWriteFS is AtomicWrite through the file system fsys (nil means
// OSFS, which AtomicWrite uses). Each step (create, every write, chmod, sync,
// close, rename, directory sync; the removal of the temporary file after an
// error) is one call of fsys or of the File it created, so a test's fsys can
// make any step fail, or stop the process there as a kill would.
func AtomicWriteFS(fsys FS, path string, write func(io.Writer) error) (err error) {
	if fsys == nil {
		fsys = OSFS{}
	}
	dir, base := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	if base == "" {
		return fmt.Errorf("writing %q: not a file name", path)
	}
	f, err := fsys.CreateTemp(dir, "."+base+tempMarker+"*")
	if err != nil {
		return writeError(path, err)
	}
	tmp := f.Name()
	defer func() {
		if err != nil {
			f.Close() // may already be closed; the error is irrelevant then
			fsys.Remove(tmp)
		}
	}()
	if err = write(f); err != nil {
		return writeError(path, err)
	}
	if err = f.Chmod(0o644); err != nil {
		return writeError(path, err)
	}
	if err = f.Sync(); err != nil {
		return writeError(path, fmt.Errorf("syncing: %w", err))
	}
	if err = f.Close(); err != nil {
		return writeError(path, err)
	}
	if err = fsys.Rename(tmp, path); err != nil {
		return writeError(path, err)
	}
	// The new file is in place; from here on there is no temporary to remove.
	if derr := fsys.SyncDir(dir); derr != nil {
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

// isTempName reports whether a directory entry is a temporary file left by
// AtomicWrite (for instance after a kill).
func isTempName(name string) bool {
	return strings.HasPrefix(name, ".") && strings.Contains(name, tempMarker)
}

// WriteFile atomically writes a state file of the given kind to path (see
// Encode for the rules on kind and section names, AtomicWrite for the
// guarantees).
func WriteFile(path, kind string, sections []Section) error {
	return writeFile(OSFS{}, path, kind, sections)
}

// writeFile is WriteFile through fsys.
func writeFile(fsys FS, path, kind string, sections []Section) error {
	return AtomicWriteFS(fsys, path, func(w io.Writer) error {
		return bufferedEncode(w, kind, sections)
	})
}

// ReadFile reads and decodes the state file at path, which must be of the
// given kind. Decoding errors are the typed errors of Decode with File set to
// path; a missing file gives an error satisfying errors.Is(err, fs.ErrNotExist).
//
// The file is read section by section, each into a buffer of its own (its
// checksum checked as Decode checks it), so the file is held once: a caller
// can turn a section into values without a copy (ShareValues) and drop the
// others. Reading the whole file and decoding a copy of each section, as a
// 10^7-row P of 10.6 GB needs, would hold it twice.
func ReadFile(path, kind string) ([]Section, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("reading state file: %w", err)
	}
	defer f.Close()
	info, err := f.Stat()
	if err != nil {
		return nil, fmt.Errorf("reading state file: %w", err)
	}
	total := info.Size()
	if int64(int(total)) != total {
		return nil, fmt.Errorf("reading state file %s: %d bytes is more than this machine can address", path, total)
	}
	// The header is read in growing pieces until it is whole.
	head := make([]byte, min(total, headChunk))
	var (
		sections []Section
		entries  []entry
		start    uint64
	)
	for {
		if _, err := f.ReadAt(head, 0); err != nil {
			return nil, fmt.Errorf("reading state file %s: %w", path, err)
		}
		var short bool
		sections, entries, start, short, err = decodeHeader(head, int(total), kind)
		if err != nil {
			return nil, setFile(err, path)
		}
		if !short {
			break
		}
		head = make([]byte, min(total, 4*int64(len(head))))
	}
	err = placeSections(uint64(total), sections, entries, start, func(off, n uint64) ([]byte, error) {
		b := make([]byte, n)
		if _, err := f.ReadAt(b, int64(off)); err != nil {
			return nil, fmt.Errorf("reading %s: %w", path, err)
		}
		return b, nil
	})
	if err != nil {
		return nil, setFile(err, path)
	}
	return sections, nil
}

// headChunk is the first piece of a state file read for its header (a
// table of a few dozen sections takes a few kilobytes).
const headChunk = 64 << 10
