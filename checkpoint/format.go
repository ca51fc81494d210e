package checkpoint

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"hash/crc32"
	"io"
	"strconv"
	"unicode"
	"unicode/utf8"
)

// FormatVersion is the version of the state file layout written by Encode.
// Decode refuses any other version with a *VersionError.
const FormatVersion uint32 = 1

// Extension is the file name extension of state files written by Run.
const Extension = ".njs"

// magic identifies a nightjar state file. The high first byte keeps text
// tools from taking the file for ASCII; "\r\n" exposes line-ending mangling.
var magic = [8]byte{0x8A, 'N', 'J', 'S', 'T', 'A', '\r', '\n'}

const (
	maxKindLen = 64
	maxNameLen = 255
	// minEntrySize is the smallest possible table entry: name length byte,
	// a one-byte name, offset, length and checksum. Decode uses it to bound
	// the section count by the bytes actually present.
	minEntrySize = 1 + 1 + 8 + 8 + 4
)

var castagnoli = crc32.MakeTable(crc32.Castagnoli)

// checksum returns the CRC-32C (Castagnoli polynomial, reflected, initial and
// final XOR 0xFFFFFFFF) of b.
func checksum(b []byte) uint32 { return crc32.Checksum(b, castagnoli) }

// Section is one named byte string inside a state file.
// Data returned by Decode aliases the decoded buffer.
type Section struct {
	Name string
	Data []byte
}

// CorruptError reports a state file that is truncated or whose bytes do not
// match their checksum. Section is empty when the fault lies in the header or
// section table. File is empty when the bytes did not come from a file.
type CorruptError struct {
	File, Section, Reason string
}

// Error returns one line such as
// `state-000000250.njs: section "gains": checksum mismatch`.
func (e *CorruptError) Error() string {
	s := e.Reason
	if e.Section != "" {
		s = "section " + strconv.Quote(e.Section) + ": " + s
	}
	if e.File != "" {
		s = e.File + ": " + s
	}
	return s
}

// VersionError reports a state file or manifest of another format version.
type VersionError struct {
	File      string
	Got, Want uint32
}

// Error returns one line naming the file and both versions.
func (e *VersionError) Error() string {
	s := fmt.Sprintf("format version %d is not supported (this build reads version %d); use the nightjar build that wrote it", e.Got, e.Want)
	if e.File != "" {
		s = e.File + ": " + s
	}
	return s
}

// KindError reports a valid state file of another kind than expected, e.g. a
// graph file handed where an optimiser state was wanted.
type KindError struct {
	File, Got, Want string
}

// Error returns one line naming the file and both kinds.
func (e *KindError) Error() string {
	s := fmt.Sprintf("holds a %q file, expected %q", e.Got, e.Want)
	if e.File != "" {
		s = e.File + ": " + s
	}
	return s
}

// MagicError reports bytes that do not start with the state file magic number.
type MagicError struct {
	File string
}

// Error returns one line naming the file.
func (e *MagicError) Error() string {
	s := "not a nightjar state file (bad magic number)"
	if e.File != "" {
		s = e.File + ": " + s
	}
	return s
}

// setFile records the file name in a typed decoding error.
func setFile(err error, file string) error {
	var (
		ce *CorruptError
		ve *VersionError
		ke *KindError
		me *MagicError
	)
	switch {
	case errors.As(err, &ce):
		ce.File = file
	case errors.As(err, &ve):
		ve.File = file
	case errors.As(err, &ke):
		ke.File = file
	case errors.As(err, &me):
		me.File = file
	default:
		return fmt.Errorf("%s: %w", file, err)
	}
	return err
}

func validKind(kind string) error {
	if len(kind) == 0 || len(kind) > maxKindLen {
		return fmt.Errorf("kind %q must be 1 to %d bytes long", kind, maxKindLen)
	}
	for i := 0; i < len(kind); i++ {
		if kind[i] < 0x21 || kind[i] > 0x7E {
			return fmt.Errorf("kind %q must be printable ASCII without spaces", kind)
		}
	}
	return nil
}

func validName(name string) error {
	if len(name) == 0 || len(name) > maxNameLen {
		return fmt.Errorf("section name %q must be 1 to %d bytes long", name, maxNameLen)
	}
	if !utf8.ValidString(name) {
		return fmt.Errorf("section name %q is not valid UTF-8", name)
	}
	for _, r := range name {
		if unicode.IsControl(r) {
			return fmt.Errorf("section name %q contains a control character", name)
		}
	}
	return nil
}

// Encode writes a state file of the given kind holding sections, in order,
// to w. kind must be 1 to 64 bytes of printable ASCII without spaces;
// section names must be unique, 1 to 255 bytes of UTF-8 without control
// characters. Encode checks these before writing anything. The layout is
// given in the package documentation.
func Encode(w io.Writer, kind string, sections []Section) error {
	if err := validKind(kind); err != nil {
		return err
	}
	if uint64(len(sections)) > 1<<32-1 {
		return fmt.Errorf("%d sections exceed the format's limit", len(sections))
	}
	seen := make(map[string]bool, len(sections))
	headerLen := 8 + 4 + 1 + len(kind) + 4 + 4
	for _, s := range sections {
		if err := validName(s.Name); err != nil {
			return err
		}
		if seen[s.Name] {
			return fmt.Errorf("section name %q appears twice", s.Name)
		}
		seen[s.Name] = true
		headerLen += 1 + len(s.Name) + 8 + 8 + 4
	}

	h := make([]byte, 0, headerLen)
	h = append(h, magic[:]...)
	h = binary.LittleEndian.AppendUint32(h, FormatVersion)
	h = append(h, byte(len(kind)))
	h = append(h, kind...)
	h = binary.LittleEndian.AppendUint32(h, uint32(len(sections)))
	off := uint64(headerLen)
	for _, s := range sections {
		h = append(h, byte(len(s.Name)))
		h = append(h, s.Name...)
		h = binary.LittleEndian.AppendUint64(h, off)
		h = binary.LittleEndian.AppendUint64(h, uint64(len(s.Data)))
		h = binary.LittleEndian.AppendUint32(h, checksum(s.Data))
		off += uint64(len(s.Data))
	}
	h = binary.LittleEndian.AppendUint32(h, checksum(h))

	if _, err := w.Write(h); err != nil {
		return err
	}
	for _, s := range sections {
		if _, err := w.Write(s.Data); err != nil {
			return err
		}
	}
	return nil
}

// reader walks the header with bounds checks; every failure is a truncation.
type reader struct {
	b   []byte
	pos int
	err error
}

func (r *reader) take(n int, what string) []byte {
	if r.err != nil {
		return nil
	}
	if n < 0 || n > len(r.b)-r.pos {
		r.err = &CorruptError{Reason: fmt.Sprintf("truncated in the header (%s at byte %d needs %d bytes, file has %d)", what, r.pos, n, len(r.b))}
		return nil
	}
	p := r.b[r.pos : r.pos+n]
	r.pos += n
	return p
}

func (r *reader) u8(what string) int {
	p := r.take(1, what)
	if p == nil {
		return 0
	}
	return int(p[0])
}

func (r *reader) u32(what string) uint32 {
	p := r.take(4, what)
	if p == nil {
		return 0
	}
	return binary.LittleEndian.Uint32(p)
}

func (r *reader) u64(what string) uint64 {
	p := r.take(8, what)
	if p == nil {
		return 0
	}
	return binary.LittleEndian.Uint64(p)
}

type entry struct {
	off, length uint64
	crc         uint32
}

// Decode parses a state file held in data and returns its sections in file
// order; their Data slices alias data (no copy). It refuses bytes that do not
// start with the magic number (*MagicError), another format version
// (*VersionError), a truncated or corrupted header, table or section
// (*CorruptError, naming the section when one is at fault), trailing bytes,
// and a file of another kind (*KindError). File fields of these errors are
// empty; ReadFile fills them.
//
// Memory: Decode allocates the returned slice and the section names only.
// The section count is checked against the bytes left before allocating
// (each table entry takes at least 22 bytes), names are at most 255 bytes
// read from data, and lengths are compared with len(data) instead of being
// allocated, so a corrupt field cannot make Decode allocate more than a
// small multiple of len(data).
func Decode(data []byte, kind string) ([]Section, error) {
	sections, entries, start, _, err := decodeHeader(data, len(data), kind)
	if err != nil {
		return nil, err
	}
	err = placeSections(uint64(len(data)), sections, entries, start, func(off, n uint64) ([]byte, error) {
		return data[off : off+n : off+n], nil
	})
	if err != nil {
		return nil, err
	}
	return sections, nil
}

// decodeHeader checks the header and section table at the start of a file
// of total bytes, of which data holds the first len(data): the magic number,
// version, kind and table with its checksum, in that order. It returns the
// sections (names only), their table entries and the offset where the
// header ends. short reports that the header ran past the end of data while
// the file is longer: the caller may retry with more of it. When data is
// the whole file, the errors are Decode's.
func decodeHeader(data []byte, total int, kind string) (sections []Section, entries []entry, start uint64, short bool, err error) {
	if len(data) < len(magic) || [8]byte(data[:8]) != magic {
		if len(data) < len(magic) && len(data) < total {
			return nil, nil, 0, true, nil
		}
		if len(data) < len(magic) && matchesMagicPrefix(data) {
			return nil, nil, 0, false, &CorruptError{Reason: fmt.Sprintf("truncated in the header (%d bytes, shorter than the magic number)", len(data))}
		}
		return nil, nil, 0, false, &MagicError{}
	}
	r := &reader{b: data, pos: len(magic)}
	fail := func(err error) ([]Section, []entry, uint64, bool, error) {
		if r.err != nil && len(data) < total {
			return nil, nil, 0, true, nil
		}
		return nil, nil, 0, false, err
	}
	version := r.u32("format version")
	if r.err != nil {
		return fail(r.err)
	}
	if version != FormatVersion {
		return fail(&VersionError{Got: version, Want: FormatVersion})
	}
	kindLen := r.u8("kind length")
	gotKind := string(r.take(kindLen, "kind"))
	count := r.u32("section count")
	if r.err != nil {
		return fail(r.err)
	}
	if kindLen == 0 || kindLen > maxKindLen {
		return fail(&CorruptError{Reason: fmt.Sprintf("bad header: kind length %d", kindLen)})
	}
	// Bound the allocation by the bytes present before trusting count: a
	// table that cannot fit in the bytes read so far is read further first
	// (so a reader of a large file never allocates for more table than it
	// has read), and refused when the file holds no more.
	if uint64(count) > uint64(len(data)-r.pos)/minEntrySize {
		if len(data) < total {
			return nil, nil, 0, true, nil
		}
		return fail(&CorruptError{Reason: fmt.Sprintf("bad header or truncated: %d sections cannot fit in %d bytes", count, total)})
	}
	sections = make([]Section, count)
	entries = make([]entry, count)
	for i := range sections {
		nameLen := r.u8("section name length")
		name := r.take(nameLen, "section name")
		entries[i].off = r.u64("section offset")
		entries[i].length = r.u64("section length")
		entries[i].crc = r.u32("section checksum")
		if r.err != nil {
			return fail(r.err)
		}
		sections[i].Name = string(name)
	}
	stored := r.u32("header checksum")
	if r.err != nil {
		return fail(r.err)
	}
	if got := checksum(data[:r.pos-4]); got != stored {
		return fail(&CorruptError{Reason: fmt.Sprintf("header checksum mismatch (stored %08x, computed %08x)", stored, got)})
	}
	// The header is now known to be as written; remaining checks catch
	// writer bugs and truncation of the section bytes.
	if err := validKind(gotKind); err != nil {
		return fail(&CorruptError{Reason: "bad header: " + err.Error()})
	}
	if gotKind != kind {
		return fail(&KindError{Got: gotKind, Want: kind})
	}
	return sections, entries, uint64(r.pos), false, nil
}

// placeSections checks the section names and the table entries against a
// file of total bytes whose header ends at start, and gives each section its
// bytes from fetch(offset, length), called only for bytes within the file:
// sections must follow the header and each other without gaps, end exactly
// at the end of the file, and match their checksums. Each section is checked
// in full before the next is looked at, so a truncated file fails naming
// the first section whose bytes are missing.
func placeSections(total uint64, sections []Section, entries []entry, start uint64, fetch func(off, n uint64) ([]byte, error)) error {
	seen := make(map[string]bool, len(sections))
	next := start
	for i, s := range sections {
		if err := validName(s.Name); err != nil {
			return &CorruptError{Reason: "bad section table: " + err.Error()}
		}
		if seen[s.Name] {
			return &CorruptError{Section: s.Name, Reason: "appears twice in the section table"}
		}
		seen[s.Name] = true
		e := entries[i]
		if e.off != next {
			return &CorruptError{Section: s.Name, Reason: fmt.Sprintf("offset %d, expected %d", e.off, next)}
		}
		if e.length > total-e.off {
			return &CorruptError{Section: s.Name, Reason: fmt.Sprintf("truncated (%d bytes at offset %d, file has %d)", e.length, e.off, total)}
		}
		next = e.off + e.length
		b, err := fetch(e.off, e.length)
		if err != nil {
			return fmt.Errorf("section %q: %w", s.Name, err)
		}
		if got := checksum(b); got != e.crc {
			return &CorruptError{Section: s.Name, Reason: "checksum mismatch"}
		}
		sections[i].Data = b
	}
	if next != total {
		return &CorruptError{Reason: fmt.Sprintf("%d unexpected bytes after the last section", total-next)}
	}
	return nil
}

// matchesMagicPrefix reports whether data, shorter than the magic number, is
// a prefix of it (a truncated state file rather than some other file).
func matchesMagicPrefix(data []byte) bool {
	n := min(len(data), len(magic))
	return string(data[:n]) == string(magic[:n])
}

// Lookup returns the data of the section called name, or an error naming the
// missing section.
func Lookup(sections []Section, name string) ([]byte, error) {
	for _, s := range sections {
		if s.Name == name {
			return s.Data, nil
		}
	}
	return nil, fmt.Errorf("section %q missing", name)
}

// bufferedEncode writes through a buffer; w may be an unbuffered file.
func bufferedEncode(w io.Writer, kind string, sections []Section) error {
	bw := bufio.NewWriterSize(w, 1<<20)
	if err := Encode(bw, kind, sections); err != nil {
		return err
	}
	return bw.Flush()
}
