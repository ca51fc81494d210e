package checkpoint

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"testing"
)

// TestChecksumVectors checks the CRC-32C used by the format against
// published values, which pins the polynomial, reflection and final XOR.
func TestChecksumVectors(t *testing.T) {
	inc := make([]byte, 32)
	dec := make([]byte, 32)
	for i := range inc {
		inc[i] = byte(i)
		dec[i] = byte(31 - i)
	}
	tests := []struct {
		name string
		in   []byte
		want uint32
	}{
		// Standard catalogue check value of CRC-32C ("CRC-32/ISCSI": check
		// = 0xE3069283 over ASCII "123456789"); common practice, cited in
		// RFC 3720 context and CRC catalogues.
		{"check string", []byte("123456789"), 0xE3069283},
		// RFC 3720 (iSCSI), appendix B.4 "CRC Examples"; the RFC lists the
		// CRC bytes as sent, i.e. little-endian, so aa 36 91 8a is 0x8A9136AA.
		// Values from memory of the RFC.
		{"32 zero bytes", make([]byte, 32), 0x8A9136AA},
		{"32 bytes 0xFF", bytes.Repeat([]byte{0xFF}, 32), 0x62A8AB43},
		{"32 incrementing bytes", inc, 0x46DD794E},
		{"32 decrementing bytes", dec, 0x113FDB5C},
	}
	for _, tc := range tests {
		if got := checksum(tc.in); got != tc.want {
			t.Errorf("%s: CRC-32C = %08X, want %08X", tc.name, got, tc.want)
		}
	}
}

// TestLayoutByHand encodes a one-section file and compares it byte for byte
// with the layout documented in doc.go, worked out by hand.
func TestLayoutByHand(t *testing.T) {
	var buf bytes.Buffer
	if err := Encode(&buf, "graph", []Section{{Name: "a", Data: []byte("123456789")}}); err != nil {
		t.Fatal(err)
	}
	var want []byte
	want = append(want, 0x8A, 'N', 'J', 'S', 'T', 'A', '\r', '\n') // magic
	want = append(want, 1, 0, 0, 0)                                // version 1
	want = append(want, 5, 'g', 'r', 'a', 'p', 'h')                // kind
	want = append(want, 1, 0, 0, 0)                                // one section
	want = append(want, 1, 'a')                                    // name
	// header: 8+4+1+5+4 + (1+1+8+8+4) + 4 = 48 bytes, so data starts at 48.
	want = append(want, 48, 0, 0, 0, 0, 0, 0, 0) // offset
	want = append(want, 9, 0, 0, 0, 0, 0, 0, 0)  // length
	// CRC-32C("123456789") = 0xE3069283 (catalogue check value), little-endian.
	want = append(want, 0x83, 0x92, 0x06, 0xE3)
	want = binary.LittleEndian.AppendUint32(want, checksum(want)) // header CRC
	want = append(want, "123456789"...)
	if len(want) != 48+9 {
		t.Fatalf("hand layout has %d bytes, expected 57", len(want))
	}
	if !bytes.Equal(buf.Bytes(), want) {
		t.Fatalf("encoding differs from the documented layout:\n got %x\nwant %x", buf.Bytes(), want)
	}
}

// sampleSections is a small optimiser-like state; an empty section sits in
// the middle to exercise zero-length bounds.
func sampleSections() []Section {
	return []Section{
		{Name: "embedding", Data: EncodeValues([]float64{1.5, -2.25, 3e-7, 4, 5, 6})},
		{Name: "empty", Data: nil},
		{Name: "gains", Data: EncodeValues([]float64{1, 1, 0.8, 1.2, 0.01, 1})},
		{Name: "rng", Data: EncodeValues([]uint64{0x0123456789ABCDEF, 42})},
	}
}

func encodeSample(t testing.TB) []byte {
	t.Helper()
	var buf bytes.Buffer
	if err := Encode(&buf, "state", sampleSections()); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// sectionRanges returns the [start, end) of each sample section in the file,
// computed from the documented layout rather than from the table.
func sectionRanges(total int, secs []Section) (dataStart int, start, end []int) {
	n := 0
	for _, s := range secs {
		n += len(s.Data)
	}
	dataStart = total - n
	p := dataStart
	for _, s := range secs {
		start = append(start, p)
		p += len(s.Data)
		end = append(end, p)
	}
	return dataStart, start, end
}

func TestRoundTrip(t *testing.T) {
	tests := []struct {
		name string
		kind string
		secs []Section
	}{
		{"no sections", "graph", nil},
		{"one empty", "state", []Section{{Name: "x"}}},
		{"several", "state", sampleSections()},
		{"long names", "affinity", []Section{{Name: strings.Repeat("n", 255), Data: []byte{1}}, {Name: "é→ß", Data: []byte{2, 3}}}},
	}
	for _, tc := range tests {
		var buf bytes.Buffer
		if err := Encode(&buf, tc.kind, tc.secs); err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		got, err := Decode(buf.Bytes(), tc.kind)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		if len(got) != len(tc.secs) {
			t.Fatalf("%s: %d sections, want %d", tc.name, len(got), len(tc.secs))
		}
		for i := range got {
			if got[i].Name != tc.secs[i].Name || !bytes.Equal(got[i].Data, tc.secs[i].Data) {
				t.Errorf("%s: section %d = %q/%x, want %q/%x", tc.name, i, got[i].Name, got[i].Data, tc.secs[i].Name, tc.secs[i].Data)
			}
		}
	}
}

func TestEncodeRefuses(t *testing.T) {
	tests := []struct {
		name string
		kind string
		secs []Section
	}{
		{"empty kind", "", nil},
		{"kind with space", "my state", nil},
		{"long kind", strings.Repeat("k", 65), nil},
		{"empty name", "state", []Section{{Name: ""}}},
		{"long name", "state", []Section{{Name: strings.Repeat("n", 256)}}},
		{"control char", "state", []Section{{Name: "a\nb"}}},
		{"bad utf8", "state", []Section{{Name: "\xff"}}},
		{"duplicate", "state", []Section{{Name: "a"}, {Name: "a"}}},
	}
	for _, tc := range tests {
		var buf bytes.Buffer
		if err := Encode(&buf, tc.kind, tc.secs); err == nil {
			t.Errorf("%s: Encode accepted it", tc.name)
		}
		if buf.Len() != 0 {
			t.Errorf("%s: Encode wrote %d bytes before refusing", tc.name, buf.Len())
		}
	}
}

// TestTruncationEveryOffset cuts a state file at every byte offset, both in
// memory and on disk: every prefix must fail (no panic, no success), and a
// cut inside the section bytes must name the first section left incomplete.
func TestTruncationEveryOffset(t *testing.T) {
	full := encodeSample(t)
	secs := sampleSections()
	dataStart, _, end := sectionRanges(len(full), secs)
	dir := t.TempDir()
	for n := 0; n < len(full); n++ {
		path := filepath.Join(dir, "state-000000250.njs")
		if err := os.WriteFile(path, full[:n], 0o644); err != nil {
			t.Fatal(err)
		}
		_, err := ReadFile(path, "state")
		if err == nil {
			t.Fatalf("truncated to %d of %d bytes: accepted", n, len(full))
		}
		var ce *CorruptError
		if !errors.As(err, &ce) {
			t.Fatalf("truncated to %d: error %T %v, want *CorruptError", n, err, err)
		}
		if ce.File != path || !strings.HasPrefix(err.Error(), path+": ") {
			t.Errorf("truncated to %d: error %q does not name the file", n, err)
		}
		wantSection := ""
		if n >= dataStart {
			for i, s := range secs {
				if end[i] > n {
					wantSection = s.Name
					break
				}
			}
		}
		if ce.Section != wantSection {
			t.Errorf("truncated to %d: section %q, want %q (%v)", n, ce.Section, wantSection, err)
		}
		if wantSection != "" && !strings.Contains(err.Error(), `section "`+wantSection+`": truncated`) {
			t.Errorf("truncated to %d: message %q", n, err)
		}
	}
}

// TestEveryBitFlip flips each bit of a state file in turn. CRC-32C detects
// every single-bit error (Castagnoli, Bräuer & Herrmann 1993; common
// practice for any CRC with more than one term), and the magic number and
// version are compared exactly, so every flip must fail, with an error of
// the type fixed by where the bit lies.
func TestEveryBitFlip(t *testing.T) {
	full := encodeSample(t)
	secs := sampleSections()
	dataStart, start, end := sectionRanges(len(full), secs)
	for i := range full {
		for bit := 0; bit < 8; bit++ {
			b := bytes.Clone(full)
			b[i] ^= 1 << bit
			_, err := Decode(b, "state")
			if err == nil {
				t.Fatalf("flip byte %d bit %d: accepted", i, bit)
			}
			var (
				me *MagicError
				ve *VersionError
				ce *CorruptError
			)
			switch {
			case i < 8:
				if !errors.As(err, &me) {
					t.Errorf("flip byte %d bit %d: %v, want *MagicError", i, bit, err)
				}
			case i < 12:
				if !errors.As(err, &ve) || ve.Want != FormatVersion {
					t.Errorf("flip byte %d bit %d: %v, want *VersionError", i, bit, err)
				}
			case i < dataStart:
				if !errors.As(err, &ce) || ce.Section != "" {
					t.Errorf("flip byte %d bit %d: %v, want header *CorruptError", i, bit, err)
				}
			default:
				want := ""
				for k := range secs {
					if i >= start[k] && i < end[k] {
						want = secs[k].Name
					}
				}
				if !errors.As(err, &ce) || ce.Section != want || ce.Reason != "checksum mismatch" {
					t.Errorf("flip byte %d bit %d: %v, want checksum mismatch in %q", i, bit, err, want)
				}
			}
		}
	}
}

func TestTypedErrors(t *testing.T) {
	full := encodeSample(t)
	newer := bytes.Clone(full)
	binary.LittleEndian.PutUint32(newer[8:], FormatVersion+1)
	trailing := append(bytes.Clone(full), 0)

	tests := []struct {
		name  string
		data  []byte
		kind  string
		check func(error) bool
		msg   string
	}{
		{"wrong magic", append([]byte("PAR1xxxx"), full[8:]...), "state",
			func(e error) bool { var x *MagicError; return errors.As(e, &x) }, "not a nightjar state file"},
		{"short other file", []byte("id,x\n"), "state",
			func(e error) bool { var x *MagicError; return errors.As(e, &x) }, "not a nightjar state file"},
		{"wrong kind", full, "graph",
			func(e error) bool { var x *KindError; return errors.As(e, &x) && x.Got == "state" && x.Want == "graph" }, `holds a "state" file, expected "graph"`},
		{"newer version", newer, "state",
			func(e error) bool { var x *VersionError; return errors.As(e, &x) && x.Got == 2 && x.Want == 1 }, "format version 2 is not supported"},
		{"trailing byte", trailing, "state",
			func(e error) bool { var x *CorruptError; return errors.As(e, &x) }, "1 unexpected bytes after the last section"},
		{"empty", nil, "state",
			func(e error) bool { var x *CorruptError; return errors.As(e, &x) }, "truncated"},
	}
	for _, tc := range tests {
		_, err := Decode(tc.data, tc.kind)
		if err == nil || !tc.check(err) {
			t.Errorf("%s: error %T %v", tc.name, err, err)
			continue
		}
		if !strings.Contains(err.Error(), tc.msg) || strings.Contains(err.Error(), "\n") {
			t.Errorf("%s: message %q, want one line containing %q", tc.name, err, tc.msg)
		}
	}
}

func TestCorruptErrorMessage(t *testing.T) {
	e := &CorruptError{File: "state-000000250.njs", Section: "gains", Reason: "checksum mismatch"}
	if got, want := e.Error(), `state-000000250.njs: section "gains": checksum mismatch`; got != want {
		t.Errorf("got %q, want %q", got, want)
	}
}

// hostileHeader builds a header whose checksum is valid but whose section
// count and lengths claim far more than the bytes present.
func hostileHeader(count uint32, length uint64) []byte {
	var h []byte
	h = append(h, magic[:]...)
	h = binary.LittleEndian.AppendUint32(h, FormatVersion)
	h = append(h, 5)
	h = append(h, "state"...)
	h = binary.LittleEndian.AppendUint32(h, count)
	h = append(h, 1, 'a')
	// The honest offset: 8+4+1+5+4 header, 22-byte entry, 4-byte checksum.
	h = binary.LittleEndian.AppendUint64(h, 48)
	h = binary.LittleEndian.AppendUint64(h, length)
	h = binary.LittleEndian.AppendUint32(h, 0)
	return binary.LittleEndian.AppendUint32(h, checksum(h))
}

// TestDecodeAllocationBound feeds headers whose count and length fields ask
// for gigabytes, and measures what Decode allocates (runtime.MemStats).
func TestDecodeAllocationBound(t *testing.T) {
	tests := []struct {
		name   string
		data   []byte
		maxSec int
	}{
		{"huge count", hostileHeader(0xFFFFFFFF, 8), 0},
		{"huge length", hostileHeader(1, 1<<62), 0},
		{"max length", hostileHeader(1, ^uint64(0)), 0},
		{"valid sample", encodeSample(t), 4},
	}
	for _, tc := range tests {
		var before, after runtime.MemStats
		runtime.GC()
		runtime.ReadMemStats(&before)
		secs, err := Decode(tc.data, "state")
		runtime.ReadMemStats(&after)
		if tc.maxSec == 0 && err == nil {
			t.Errorf("%s: accepted", tc.name)
		}
		if len(secs) > tc.maxSec {
			t.Errorf("%s: %d sections", tc.name, len(secs))
		}
		// Bound: the Section and entry slices (≤ 64 bytes per 22 input bytes),
		// names (≤ input bytes), the name-set map, plus a constant for the
		// error value and runtime noise (MemStats counts every goroutine).
		// A decoder trusting the fields would allocate gigabytes here.
		limit := uint64(8*len(tc.data) + 64<<10)
		if got := after.TotalAlloc - before.TotalAlloc; got > limit {
			t.Errorf("%s: Decode allocated %d bytes for %d input bytes (limit %d)", tc.name, got, len(tc.data), limit)
		}
	}
	// Allocation count on a valid file: sections, entries, names, name set.
	data := encodeSample(t)
	allocs := testing.AllocsPerRun(20, func() {
		if _, err := Decode(data, "state"); err != nil {
			t.Fatal(err)
		}
	})
	if allocs > 12 {
		t.Errorf("Decode of 4 sections made %.0f allocations, want ≤ 12", allocs)
	}
}

func BenchmarkDecode(b *testing.B) {
	var buf bytes.Buffer
	big := EncodeValues(make([]float64, 1<<20))
	if err := Encode(&buf, "state", []Section{{Name: "embedding", Data: big}, {Name: "gains", Data: big}}); err != nil {
		b.Fatal(err)
	}
	data := buf.Bytes()
	b.SetBytes(int64(len(data)))
	b.ResetTimer()
	for range b.N {
		if _, err := Decode(data, "state"); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkWriteFile measures an atomic, synced write of a 2-D state for
// 100,000 points (embedding, update, gains: 4.8 MB).
func BenchmarkWriteFile(b *testing.B) {
	v := EncodeValues(make([]float64, 2*100000))
	secs := []Section{{Name: "embedding", Data: v}, {Name: "update", Data: v}, {Name: "gains", Data: v}}
	path := filepath.Join(b.TempDir(), "state-000000001.njs")
	b.SetBytes(int64(3 * len(v)))
	for range b.N {
		if err := WriteFile(path, "state", secs); err != nil {
			b.Fatal(err)
		}
	}
}

// TestReadFileLongHeader reads a file whose section table (3,000 sections,
// about 150 KB) is longer than the first piece ReadFile reads for the
// header, whole and cut inside the table: the sections come back as written,
// each in its own buffer, and the cut file fails as Decode fails on the
// same bytes.
func TestReadFileLongHeader(t *testing.T) {
	var secs []Section
	for i := range 3000 {
		secs = append(secs, Section{Name: fmt.Sprintf("section-with-a-long-name-%05d", i), Data: EncodeValues([]int64{int64(i)})})
	}
	var buf bytes.Buffer
	if err := Encode(&buf, "graph", secs); err != nil {
		t.Fatal(err)
	}
	full := buf.Bytes()
	if head := len(full) - 8*len(secs); head <= headChunk {
		t.Fatalf("the header is %d bytes, not longer than the first piece (%d)", head, headChunk)
	}
	dir := t.TempDir()
	path := filepath.Join(dir, "long.njs")
	if err := os.WriteFile(path, full, 0o644); err != nil {
		t.Fatal(err)
	}
	got, err := ReadFile(path, "graph")
	if err != nil {
		t.Fatal(err)
	}
	for i := range secs {
		if got[i].Name != secs[i].Name || !bytes.Equal(got[i].Data, secs[i].Data) || cap(got[i].Data) != 8 {
			t.Fatalf("section %d: %q % x (cap %d), want %q % x", i, got[i].Name, got[i].Data, cap(got[i].Data), secs[i].Name, secs[i].Data)
		}
	}
	cut := full[:headChunk+1000]
	if err := os.WriteFile(path, cut, 0o644); err != nil {
		t.Fatal(err)
	}
	_, err = ReadFile(path, "graph")
	_, derr := Decode(cut, "graph")
	if err == nil || derr == nil || err.Error() != setFile(derr, path).Error() {
		t.Errorf("cut in the table: ReadFile error %v, Decode error %v", err, derr)
	}
}
