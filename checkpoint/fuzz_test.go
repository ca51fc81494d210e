package checkpoint

import (
	"bytes"
	"encoding/binary"
	"errors"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// FuzzDecode feeds arbitrary bytes to Decode. Properties: no panic; an
// error is one of the typed errors, on one line; an accepted input is
// canonical (re-encoding gives the same bytes, so nothing was skipped or
// guessed); and what Decode allocated is bounded by the input: each
// returned section took at least 22 table bytes plus its name, so
// 22·len(sections) + Σ len(name) ≤ len(data). Section data alias the input.
// Together with the count check before allocation (see Decode), this is the
// O(len(data)) allocation bound; TestDecodeAllocationBound measures it on
// hostile headers. Seeds: testdata/fuzz/FuzzDecode (go run ./testdata/gencorpus).
func FuzzDecode(f *testing.F) {
	f.Add(encodeSample(f))
	f.Add(hostileHeader(0xFFFFFFFF, 8))
	f.Add(hostileHeader(1, 1<<63))
	f.Fuzz(func(t *testing.T, data []byte) {
		// Random bytes almost never carry valid checksums, so a fuzzer would
		// stop at the header checksum. The second input has its checksums
		// recomputed, which lets mutations reach the table and bounds checks.
		for _, in := range [][]byte{data, fixChecksums(data)} {
			checkDecode(t, in)
		}
	})
}

// checkDecode asserts the FuzzDecode properties on one input.
func checkDecode(t *testing.T, data []byte) {
	t.Helper()
	for _, kind := range []string{"state", "graph"} {
		secs, err := Decode(data, kind)
		if err != nil {
			var (
				ce *CorruptError
				ve *VersionError
				ke *KindError
				me *MagicError
			)
			if !errors.As(err, &ce) && !errors.As(err, &ve) && !errors.As(err, &ke) && !errors.As(err, &me) {
				t.Fatalf("untyped error %T: %v", err, err)
			}
			if strings.Contains(err.Error(), "\n") {
				t.Fatalf("multi-line error %q", err)
			}
			continue
		}
		used := 0
		for _, s := range secs {
			used += minEntrySize - 1 + len(s.Name)
		}
		if used > len(data) {
			t.Fatalf("%d sections with %d table bytes from %d input bytes", len(secs), used, len(data))
		}
		var buf bytes.Buffer
		if err := Encode(&buf, kind, secs); err != nil {
			t.Fatalf("decoded sections do not re-encode: %v", err)
		}
		if !bytes.Equal(buf.Bytes(), data) {
			t.Fatalf("accepted a non-canonical encoding:\n in %x\nout %x", data, buf.Bytes())
		}
	}
}

// FuzzReadFile writes arbitrary bytes to a file and reads it back with
// ReadFile, which reads section by section instead of the whole file at
// once. Property: it agrees with Decode on the same bytes (Decode is the
// decoder FuzzDecode checks): the same error, word for word, with the file
// named, or the same sections, each in a buffer of its own.
// Seeds: testdata/fuzz/FuzzReadFile (go run ./testdata/gencorpus).
func FuzzReadFile(f *testing.F) {
	f.Add(encodeSample(f))
	f.Add(hostileHeader(0xFFFFFFFF, 8))
	dir := f.TempDir()
	f.Fuzz(func(t *testing.T, data []byte) {
		for _, in := range [][]byte{data, fixChecksums(data)} {
			checkReadFile(t, dir, in)
		}
	})
}

// checkReadFile asserts the FuzzReadFile property on one input.
func checkReadFile(t *testing.T, dir string, data []byte) {
	t.Helper()
	path := filepath.Join(dir, "in.njs")
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	for _, kind := range []string{"state", "graph"} {
		want, werr := Decode(data, kind)
		got, gerr := ReadFile(path, kind)
		if werr != nil || gerr != nil {
			if werr == nil || gerr == nil || gerr.Error() != setFile(werr, path).Error() {
				t.Fatalf("kind %s: ReadFile error %v, Decode error %v", kind, gerr, werr)
			}
			continue
		}
		if len(got) != len(want) {
			t.Fatalf("kind %s: ReadFile gives %d sections, Decode %d", kind, len(got), len(want))
		}
		for i := range got {
			if got[i].Name != want[i].Name || !bytes.Equal(got[i].Data, want[i].Data) {
				t.Fatalf("kind %s: section %d is %q (%d bytes), Decode gives %q (%d bytes)", kind, i, got[i].Name, len(got[i].Data), want[i].Name, len(want[i].Data))
			}
			if cap(got[i].Data) != len(got[i].Data) {
				t.Fatalf("kind %s: section %q shares its buffer (cap %d, len %d)", kind, got[i].Name, cap(got[i].Data), len(got[i].Data))
			}
		}
	}
}

// fixChecksums returns a copy of data whose section and header checksums are
// recomputed wherever the table can be walked (following the layout in
// doc.go); other bytes are unchanged.
func fixChecksums(data []byte) []byte {
	b := bytes.Clone(data)
	if len(b) < 13 {
		return b
	}
	p := 13 + int(b[12])
	if p+4 > len(b) {
		return b
	}
	n := binary.LittleEndian.Uint32(b[p:])
	p += 4
	if uint64(n) > uint64(len(b))/minEntrySize {
		return b
	}
	type span struct {
		crcAt       int
		off, length uint64
	}
	var spans []span
	for range n {
		if p >= len(b) {
			return b
		}
		p += 1 + int(b[p])
		if p+20 > len(b) {
			return b
		}
		spans = append(spans, span{p + 16, binary.LittleEndian.Uint64(b[p:]), binary.LittleEndian.Uint64(b[p+8:])})
		p += 20
	}
	if p+4 > len(b) {
		return b
	}
	for _, s := range spans {
		if s.off <= uint64(len(b)) && s.length <= uint64(len(b))-s.off {
			binary.LittleEndian.PutUint32(b[s.crcAt:], checksum(b[s.off:s.off+s.length]))
		}
	}
	binary.LittleEndian.PutUint32(b[p:], checksum(b[:p]))
	return b
}

// FuzzManifest feeds arbitrary bytes to ParseManifest. Properties: no panic;
// an accepted manifest passes Validate, marshals, and parses back to the
// same JSON (what SaveManifest writes, Open can read).
// Seeds: testdata/fuzz/FuzzManifest.
func FuzzManifest(f *testing.F) {
	if b, err := marshalManifest(validManifest()); err == nil {
		f.Add(b)
	}
	f.Add([]byte(`{"format_version":1}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		m, err := ParseManifest(data)
		if err != nil {
			return
		}
		if err := m.Validate(); err != nil {
			t.Fatalf("accepted manifest fails Validate: %v", err)
		}
		b1, err := marshalManifest(m)
		if err != nil {
			t.Fatalf("accepted manifest does not marshal: %v", err)
		}
		m2, err := ParseManifest(b1)
		if err != nil {
			t.Fatalf("written manifest does not parse: %v\n%s", err, b1)
		}
		b2, err := marshalManifest(m2)
		if err != nil || !bytes.Equal(b1, b2) {
			t.Fatalf("manifest changed on a second round trip (%v):\n%s\n%s", err, b1, b2)
		}
	})
}

// TestCorpusSeeds checks that the committed seeds named valid-* decode, so
// the fuzz properties on accepted inputs start from real files.
func TestCorpusSeeds(t *testing.T) {
	tests := []struct {
		file string
		kind string
	}{
		{"testdata/fuzz/FuzzDecode/valid-state", "state"},
		{"testdata/fuzz/FuzzDecode/valid-empty", "state"},
		{"testdata/fuzz/FuzzDecode/valid-graph", "graph"},
		{"testdata/fuzz/FuzzManifest/valid", ""},
		{"testdata/fuzz/FuzzManifest/minimal", ""},
	}
	for _, tc := range tests {
		raw, err := os.ReadFile(tc.file)
		if err != nil {
			t.Fatal(err)
		}
		s, ok := strings.CutPrefix(string(raw), "go test fuzz v1\n[]byte(")
		s, ok2 := strings.CutSuffix(s, ")\n")
		if !ok || !ok2 {
			t.Fatalf("%s: not a corpus file", tc.file)
		}
		data, err := strconv.Unquote(s)
		if err != nil {
			t.Fatalf("%s: %v", tc.file, err)
		}
		if tc.kind == "" {
			_, err = ParseManifest([]byte(data))
		} else {
			_, err = Decode([]byte(data), tc.kind)
		}
		if err != nil {
			t.Errorf("%s: %v", tc.file, err)
		}
	}
}

// TestFixChecksums makes sure the fuzz helper really repairs checksums:
// a valid file with a damaged section and header checksum decodes again.
func TestFixChecksums(t *testing.T) {
	good := encodeSample(t)
	bad := bytes.Clone(good)
	bad[len(bad)-1] ^= 0xFF // last byte of "rng"
	if _, err := Decode(bad, "state"); err == nil {
		t.Fatal("damaged file accepted")
	}
	if _, err := Decode(fixChecksums(bad), "state"); err != nil {
		t.Fatalf("repaired file refused: %v", err)
	}
}
