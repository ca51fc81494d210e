package ingest

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"errors"
	"io"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"unicode/utf8"

	"nightjar/internal/par"
)

// readCSV reads a CSV or TSV part, compressed with kind ("" = not compressed).
func (as *assembly) readCSV(path string, f *os.File, kind string, size int64) error {
	var src io.Reader = f
	var cr *csv.Reader
	pos := func() int64 { return cr.InputOffset() }
	if kind != "" {
		cnt := &counter{r: f}
		d, err := decompressor(kind, bufio.NewReaderSize(cnt, 256<<10))
		if err != nil {
			return wrapInputErr(path, "", 0, err, "corrupt %s-compressed file", kind)
		}
		defer d.Close()
		src = &lineLimit{r: d, path: path, kind: kind}
		pos = func() int64 { return cnt.n }
		as.formats[len(as.formats)-1] = "csv+" + kind
	}
	br := bufio.NewReaderSize(src, 1<<20)
	cr = csv.NewReader(br)
	cr.Comma = csvComma(path, br)
	cr.ReuseRecord = false // records are kept until their group is parsed
	header, err := readCSVHeader(path, cr)
	if err != nil {
		return err
	}
	sample, err := sampleCSV(path, cr, size, pos)
	if err != nil {
		if len(as.ds.Parts) > 1 && len(sample.rows) == 0 && err == errEmptyCSV {
			return nil // an empty part of a dataset
		}
		if err == errEmptyCSV {
			return inputErr(path, "", 0, "empty table (0 rows)")
		}
		return err
	}
	cols, infos := csvColumns(header, sample.rows)
	cols = as.withKeys(cols)
	sel, err := as.selectPart(cols)
	if err != nil {
		return err
	}
	opt := as.opt
	opt.BatchRows = as.ctl.batch(opt, len(sel.features))
	cp := &csvPlan{as: as, sel: sel, batch: opt.BatchRows, threads: max(1, opt.Threads), idKey: -1, labelKey: -1}
	var idName, labelName string
	var idInts, labelInts bool
	if sel.id >= 0 {
		idName, cp.idKey = cols[sel.id].name, cols[sel.id].key-1
		idInts = cp.idKey < 0 && infos[sel.id].integer
	}
	if sel.label >= 0 {
		labelName, cp.labelKey = cols[sel.label].name, cols[sel.label].key-1
		labelInts = cp.labelKey < 0 && infos[sel.label].integer && infos[sel.label].nonEmpty > 0
	}
	cp.idP, cp.labelP = as.passCols(idName, labelName, idInts, labelInts)
	widths := make([]int, len(sel.features))
	for j := range widths {
		widths[j] = 1
	}
	as.ensureBuilder(cols, sel, widths, sample.estimate)
	rows := sample.rows
	next := func() ([]string, error) { // the sampled records first, then the rest
		if len(rows) > 0 {
			rec := rows[0]
			rows = rows[1:]
			return rec, nil
		}
		return cr.Read()
	}
	return cp.readAll(next)
}

// lineLimit refuses a decompressed stream with a line longer than
// maxLineBytes: a small compressed file could otherwise hold one huge line
// that the CSV reader would keep in memory whole.
type lineLimit struct {
	r          io.Reader
	path, kind string
	run        int // bytes since the last newline
}

// maxLineBytes bounds a line of a compressed CSV file (a row of 200,000
// columns of 20 characters fits).
const maxLineBytes = 4 << 20

func (l *lineLimit) Read(p []byte) (int, error) {
	n, err := l.r.Read(p)
	for buf := p[:n]; ; {
		k := bytes.IndexByte(buf, '\n')
		if k < 0 {
			l.run += len(buf)
		} else {
			l.run += k
		}
		if l.run > maxLineBytes {
			return 0, inputErr(l.path, "", 0, "a line of the %s-compressed text is longer than %d MiB: not a CSV table", l.kind, maxLineBytes>>20)
		}
		if k < 0 {
			break
		}
		l.run, buf = 0, buf[k+1:]
	}
	return n, err
}

// csvComma returns the field separator: a tab for a .tsv file or when the first
// line holds tabs and no commas, else a comma.
func csvComma(path string, br *bufio.Reader) rune {
	if base, _ := stripCompression(path); strings.EqualFold(filepath.Ext(base), ".tsv") {
		return '\t'
	}
	line, _ := br.Peek(min(br.Buffered()+br.Size(), 64<<10))
	if k := bytes.IndexByte(line, '\n'); k >= 0 {
		line = line[:k]
	}
	if bytes.IndexByte(line, '\t') >= 0 && bytes.IndexByte(line, ',') < 0 {
		return '\t'
	}
	return ','
}

// readCSVHeader reads the header row: names trimmed of spaces and of a leading
// byte order mark. Every later record must have as many fields.
func readCSVHeader(path string, cr *csv.Reader) ([]string, error) {
	header, err := cr.Read()
	if err == io.EOF {
		return nil, inputErr(path, "", 0, "empty CSV file (no header row)")
	}
	if err != nil {
		return nil, csvError(path, 0, err)
	}
	header = slices.Clone(header)
	for i := range header {
		header[i] = strings.TrimSpace(header[i])
	}
	header[0] = strings.TrimPrefix(header[0], "\ufeff")
	cr.FieldsPerRecord = len(header)
	return header, nil
}

// csvSample holds the first records of a CSV file and an estimate of its row count.
type csvSample struct {
	rows     [][]string
	estimate int64
}

// errEmptyCSV is returned by sampleCSV for a file without data rows.
var errEmptyCSV = errors.New("no data rows")

// sampleCSV reads up to csvSampleRows records after the header. The row count is
// estimated from the bytes per sampled row, 5% over, so that the matrix is usually
// allocated once (it grows if the estimate falls short); pos tells how many bytes
// of the file's size have been consumed. A file without data rows gives
// errEmptyCSV.
func sampleCSV(path string, cr *csv.Reader, size int64, pos func() int64) (csvSample, error) {
	var s csvSample
	headerEnd := pos()
	sawEOF := false
	for len(s.rows) < csvSampleRows {
		rec, err := cr.Read()
		if err == io.EOF {
			sawEOF = true
			break
		}
		if err != nil {
			return s, csvError(path, int64(len(s.rows))+1, err)
		}
		s.rows = append(s.rows, rec)
	}
	if len(s.rows) == 0 {
		return s, errEmptyCSV
	}
	s.estimate = int64(len(s.rows))
	if !sawEOF {
		perRow := float64(pos()-headerEnd) / float64(len(s.rows))
		rest := float64(size - pos())
		s.estimate += int64(1.05*max(rest, 0)/max(perRow, 1)) + 1024
	}
	return s, nil
}

// csvColumns describes the columns for column selection from the sampled records.
func csvColumns(header []string, sample [][]string) ([]colInfo, []csvInfo) {
	infos := make([]csvInfo, len(header))
	for c := range infos {
		infos[c] = csvInfo{integer: true}
	}
	for _, rec := range sample {
		for c, s := range rec {
			if strings.TrimSpace(s) == "" {
				continue
			}
			in := &infos[c]
			in.nonEmpty++
			if _, ok := parseNumber(s); ok {
				in.numbers++
			}
			if in.integer {
				_, in.integer = parseCanonicalInt(s)
			}
		}
	}
	cols := make([]colInfo, len(header))
	for c, name := range header {
		in := infos[c]
		cols[c] = colInfo{name: name, numeric: in.numeric(), typ: "number", integer: in.numeric() && in.integer && in.nonEmpty > 0}
		switch {
		case in.nonEmpty == 0:
			cols[c].typ = "empty in the first rows"
		case !in.numeric():
			cols[c].typ = "text"
		}
	}
	return cols, infos
}

// readAll reads every record from next into the builder, chunk by chunk.
func (cp *csvPlan) readAll(next func() ([]string, error)) error {
	for {
		done, err := cp.chunk(cp.as.b, next)
		if err != nil {
			return err
		}
		cp.as.progress()
		if done {
			return nil
		}
	}
}

// csvError turns an encoding/csv error at data row row (0: header) into an InputError.
func csvError(path string, row int64, err error) error {
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		return wrapInputErr(path, "", row, pe.Err, "malformed CSV (line %d)", pe.StartLine)
	}
	return wrapInputErr(path, "", row, err, "cannot read CSV")
}

type csvPlan struct {
	as          *assembly
	idKey       int // folder key of the id, -1 when a column or none
	labelKey    int
	sel         selection
	batch       int
	threads     int // goroutines parsing numbers, at least 1
	idP, labelP *passCol
	ids, labels []string
	group       [][]string // records read, not yet parsed
}

// csvGroupRows is the number of records gathered before their numbers are parsed
// (in parallel, csvParseBlock rows per task).
const (
	csvGroupRows  = 8192
	csvParseBlock = 1024
)

// chunk reads up to batch rows into the builder; done reports the end of the file.
// Records are read sequentially in groups; the numbers of a group are parsed in
// parallel over fixed blocks of rows, each row by one goroutine, so the result does
// not depend on the thread count.
func (cp *csvPlan) chunk(b *builder, next func() ([]string, error)) (done bool, err error) {
	dst := b.begin(cp.batch)
	cp.ids, cp.labels = cp.ids[:0], cp.labels[:0]
	n := 0
	var readErr error // a malformed record; reported after the bad values before it
	for n < cp.batch && !done && readErr == nil {
		done, readErr = cp.readGroup(b, next, n)
		cp.parseGroup(b, dst, n)
		n += len(cp.group)
	}
	clear(cp.group[:cap(cp.group)]) // let the collector have the records
	b.truncate(n)
	for _, m := range b.marks {
		if m.why != badNone {
			b.bad = true
			break
		}
	}
	if readErr != nil && (!b.bad || b.skip) {
		return false, readErr
	}
	keep, err := b.finish() // fails at the first bad value when readErr != nil
	if err != nil {
		return false, err
	}
	if err := cp.appendPass(b, keep, n); err != nil {
		return false, err
	}
	if len(b.fresh) > 0 && cp.idP != nil {
		b.noteIDs(func(i int) string {
			if cp.idKey >= 0 {
				v, _ := cp.as.keyValue(cp.idKey)
				return v
			}
			return cp.ids[i]
		})
	}
	b.advance(n)
	return done, nil
}

// readGroup reads the next group of records (at most csvGroupRows, and no more
// than fill the chunk, which holds n rows already) into cp.group, keeping their
// ids and labels as text. done reports the end of the file; readErr is a
// malformed record, which ends the group.
func (cp *csvPlan) readGroup(b *builder, next func() ([]string, error), n int) (done bool, readErr error) {
	cp.group = cp.group[:0]
	for len(cp.group) < csvGroupRows && n+len(cp.group) < cp.batch {
		rec, err := next()
		if err == io.EOF {
			return true, nil
		}
		if err != nil {
			return false, csvError(b.file, b.seen+int64(n+len(cp.group))+1, err)
		}
		cp.group = append(cp.group, rec)
		if cp.idP != nil && cp.idKey < 0 {
			cp.ids = append(cp.ids, strings.Clone(strings.TrimSpace(rec[cp.sel.id])))
		}
		if cp.labelP != nil && cp.labelKey < 0 {
			cp.labels = append(cp.labels, cp.labelP.text(strings.TrimSpace(rec[cp.sel.label])))
		}
	}
	return false, nil
}

// appendPass appends the ids and labels of the chunk's kept rows: those of the n
// rows with keep[i] set, or all n when keep is nil.
func (cp *csvPlan) appendPass(b *builder, keep []bool, n int) error {
	if cp.idKey >= 0 && cp.idP != nil {
		v, null := cp.as.keyValue(cp.idKey)
		if err := cp.idP.appendConst(v, null, n, keep, b.seen); err != nil {
			return err
		}
	}
	if cp.labelKey >= 0 && cp.labelP != nil {
		v, null := cp.as.keyValue(cp.labelKey)
		if err := cp.labelP.appendConst(v, null, n, keep, b.seen); err != nil {
			return err
		}
	}
	for i := 0; i < n; i++ {
		if keep != nil && !keep[i] {
			continue
		}
		if cp.idP != nil && cp.idKey < 0 {
			if err := cp.idP.appendCSVID(cp.ids[i], b.seen+int64(i)+1); err != nil {
				return err
			}
		}
		if cp.labelP != nil && cp.labelKey < 0 {
			if !utf8.ValidString(cp.labels[i]) {
				return inputErr(cp.labelP.file, cp.labelP.col.Name, b.seen+int64(i)+1, "text is not valid UTF-8 (a CSV must be UTF-8 throughout)")
			}
			cp.labelP.appendCSVLabel(cp.labels[i])
		}
	}
	return nil
}

// parseGroup parses the features of cp.group into chunk rows first, first+1, ….
func (cp *csvPlan) parseGroup(b *builder, dst []float32, first int) {
	par.Blocks(len(cp.group), csvParseBlock, cp.threads, func(_, _, lo, hi int) {
		cp.parseRows(b, dst, first, lo, hi)
	})
}

// parseRows parses group rows [lo, hi). It writes only those rows of dst and of
// b.marks, so blocks may run concurrently.
func (cp *csvPlan) parseRows(b *builder, dst []float32, first, lo, hi int) {
	d := b.d
	for g := lo; g < hi; g++ {
		i := first + g
		rec := cp.group[g]
		row := dst[i*d : (i+1)*d]
		setMark := func(j int, why uint8, text string) {
			if b.marks[i].why == badNone {
				b.marks[i] = mark{col: int32(j), why: why, text: text}
			}
		}
		for j, c := range cp.sel.features {
			s := rec[c]
			if strings.TrimSpace(s) == "" {
				row[j] = 0
				setMark(j, badNull, "")
				continue
			}
			v, ok := parseNumber(s)
			if !ok {
				row[j] = 0
				setMark(j, badText, s)
				continue
			}
			row[j] = float32(v)
			if row[j]-row[j] != 0 {
				if finiteText(s) {
					setMark(j, badRange, s) // a finite number that overflows float32
				} else {
					setMark(j, floatReason(row[j]), "")
				}
			}
		}
	}
}

// appendCSVID appends a CSV id, switching the column from integers to text at the
// first value that is not a canonical integer.
func (p *passCol) appendCSVID(s string, row int64) error {
	if s == "" {
		return inputErr(p.file, p.col.Name, row, "id is null (empty)")
	}
	if !utf8.ValidString(s) {
		return inputErr(p.file, p.col.Name, row, "text is not valid UTF-8 (a CSV must be UTF-8 throughout)")
	}
	if p.col.Ints != nil {
		if v, ok := parseCanonicalInt(s); ok {
			p.appendInt(v)
			return nil
		}
	}
	p.appendText(s)
	return nil
}

// appendCSVLabel appends a CSV label (trimmed): an empty cell is a null, and an
// integer column turns to text at the first value that is not a canonical
// integer.
func (p *passCol) appendCSVLabel(s string) {
	switch {
	case s == "":
		_ = p.appendNull(0)
	case p.col.Ints != nil:
		if v, ok := parseCanonicalInt(s); ok {
			p.appendInt(v)
			return
		}
		fallthrough
	default:
		p.appendText(s)
	}
}
