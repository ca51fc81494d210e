package checkpoint

import (
	"os"
	"path/filepath"
	"testing"
	"time"
)

// TestFingerprintParts: the sizes add up, the latest modification time is
// kept, the name is the one given; a missing part or a directory is refused.
func TestFingerprintParts(t *testing.T) {
	dir := t.TempDir()
	a, b := filepath.Join(dir, "a"), filepath.Join(dir, "b")
	os.WriteFile(a, []byte("12345"), 0o644)
	os.WriteFile(b, []byte("123"), 0o644)
	late := time.Date(2030, 1, 2, 3, 4, 5, 0, time.UTC)
	os.Chtimes(b, late, late)
	fp, err := FingerprintParts(dir, []string{a, b})
	if err != nil {
		t.Fatal(err)
	}
	if fp.Path != dir || fp.Size != 8 || !fp.ModTime.Equal(late) || fp.ValuesHash != "" {
		t.Errorf("%+v", fp)
	}
	for _, files := range [][]string{nil, {a, filepath.Join(dir, "c")}, {dir}} {
		if _, err := FingerprintParts(dir, files); err == nil {
			t.Errorf("%v accepted", files)
		}
	}
}
