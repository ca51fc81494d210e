package checkpoint

import (
	"fmt"
	"os"
	"path/filepath"
)

// FingerprintParts returns the fingerprint of an input read from several
// files (a directory of parts, a glob pattern, or a list of paths): Path is
// name, the input as the caller names it; Size is the total size of the files
// and ModTime the latest of their modification times. ValuesHash is left
// empty: the caller's digest of the values read from every part, in order,
// decides whether two fingerprints are the same input (see Same), since a
// part added, removed or changed changes it. It returns an error if a file
// cannot be read or is not a regular file, or files is empty.
func FingerprintParts(name string, files []string) (Fingerprint, error) {
	if len(files) == 0 {
		return Fingerprint{}, fmt.Errorf("fingerprinting %s: no files", name)
	}
	fp := Fingerprint{Path: name}
	for _, f := range files {
		abs, err := filepath.Abs(f)
		if err != nil {
			return Fingerprint{}, fmt.Errorf("fingerprinting %s: %w", f, err)
		}
		fi, err := os.Stat(abs)
		if err != nil {
			return Fingerprint{}, fmt.Errorf("fingerprinting %s: %w", f, err)
		}
		if !fi.Mode().IsRegular() {
			return Fingerprint{}, fmt.Errorf("fingerprinting %s: not a regular file", f)
		}
		fp.Size += fi.Size()
		if t := fi.ModTime().UTC(); t.After(fp.ModTime) {
			fp.ModTime = t
		}
	}
	return fp, nil
}
