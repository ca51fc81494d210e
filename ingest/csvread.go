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
	"strconv"
	"strings"

	"nightjar/internal/par"
)

// csvSampleRows is the number of leading rows used to tell numeric CSV columns from
// text columns (and integer ids from text ids).
const csvSampleRows = 1000

// csvInfo describes what the sampled rows say about one CSV column.
type csvInfo struct {
	nonEmpty int
	numbers  int  // non-empty sampled values that parse as numbers
	integer  bool // every non-empty sampled value is a canonical int64
}

// numeric tells whether the column counts as numeric: at least half of its non-empty
// sampled values are numbers. The others are then bad values (reported with their
// row, or dropped with SkipInvalid) rather than making the column text.
func (in csvInfo) numeric() bool { return in.nonEmpty > 0 && 2*in.numbers >= in.nonEmpty }

// parseNumber parses a CSV number, rounded once, correctly, to float32 (parsing to
// float64 first could round twice). Values beyond float32's range give ±Inf.
func parseNumber(s string) (float64, bool) {
	v, err := strconv.ParseFloat(strings.TrimSpace(s), 32)
	if err != nil {
		var ne *strconv.NumError
		if errors.As(err, &ne) && ne.Err == strconv.ErrRange {
			return v, true // ±Inf for values beyond float32's range
		}
		return 0, false
	}
	return v, true
}

func parseCanonicalInt(s string) (int64, bool) {
	s = strings.TrimSpace(s)
	v, err := strconv.ParseInt(s, 10, 64)
	if err != nil || strconv.FormatInt(v, 10) != s {
		return 0, false
	}
	return v, true
}

func readCSV(path string, f *os.File, opt Options, ctl readCtl) (*Table, error) {
	br := bufio.NewReaderSize(f, 1<<20)
	cr := csv.NewReader(br)
	cr.Comma = csvComma(path, br)
	cr.ReuseRecord = false // records are kept until their group is parsed
	header, err := readCSVHeader(path, cr)
	if err != nil {
		return nil, err
	}
	sample, err := sampleCSV(path, cr, fileSize(f))
	if err != nil {
		return nil, err
	}
	cols, infos := csvColumns(header, sample.rows)
	sel, err := selectColumns(path, cols, opt)
	if err != nil {
		return nil, err
	}
	opt.BatchRows = ctl.batch(opt, len(sel.features))
	cp := &csvPlan{sel: sel, batch: opt.BatchRows, threads: max(1, opt.Threads)}
	if sel.id >= 0 && !ctl.noPass {
		cp.idP = newPassCol(path, header[sel.id], true, infos[sel.id].integer)
	}
	if sel.label >= 0 && !ctl.noPass {
		cp.labelP = newPassCol(path, header[sel.label], false, false)
	}
	b := newBuilder(path, sel.names(cols), opt, presizeRows(sample.estimate, len(sel.features), fileSize(f)), ctl)
	rows := sample.rows
	next := func() ([]string, error) { // the sampled records first, then the rest
		if len(rows) > 0 {
			rec := rows[0]
			rows = rows[1:]
			return rec, nil
		}
		return cr.Read()
	}
	return cp.readAll(b, next, opt.Progress)
}

// csvComma returns the field separator: a tab for a .tsv file or when the first
// line holds tabs and no commas, else a comma.
func csvComma(path string, br *bufio.Reader) rune {
	if strings.EqualFold(filepath.Ext(path), ".tsv") {
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

// sampleCSV reads up to csvSampleRows records after the header. The row count is
// estimated from the bytes per sampled row, 5% over, so that the matrix is usually
// allocated once (it grows if the estimate falls short). A file without data rows
// is an error.
func sampleCSV(path string, cr *csv.Reader, size int64) (csvSample, error) {
	var s csvSample
	headerEnd := cr.InputOffset()
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
		return s, inputErr(path, "", 0, "empty table (0 rows)")
	}
	s.estimate = int64(len(s.rows))
	if !sawEOF {
		perRow := float64(cr.InputOffset()-headerEnd) / float64(len(s.rows))
		rest := float64(size - cr.InputOffset())
		s.estimate += int64(1.05*rest/max(perRow, 1)) + 1024
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
		cols[c] = colInfo{name: name, numeric: in.numeric(), typ: "number"}
		switch {
		case in.nonEmpty == 0:
			cols[c].typ = "empty in the first rows"
		case !in.numeric():
			cols[c].typ = "text"
		}
	}
	return cols, infos
}

// readAll reads every record from next into the builder, chunk by chunk, and
// returns the table.
func (cp *csvPlan) readAll(b *builder, next func() ([]string, error), progress func(done, total int64)) (*Table, error) {
	for {
		done, err := cp.chunk(b, next)
		if err != nil {
			return nil, err
		}
		if progress != nil {
			progress(b.seen, -1)
		}
		if done {
			break
		}
	}
	t, err := b.table()
	if err != nil {
		return nil, err
	}
	if cp.idP != nil {
		t.ID = cp.idP.col
	}
	if cp.labelP != nil {
		t.Label = cp.labelP.col
	}
	return t, nil
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
		if cp.idP != nil {
			cp.ids = append(cp.ids, strings.Clone(strings.TrimSpace(rec[cp.sel.id])))
		}
		if cp.labelP != nil {
			cp.labels = append(cp.labels, cp.labelP.text(rec[cp.sel.label]))
		}
	}
	return false, nil
}

// appendPass appends the ids and labels of the chunk's kept rows: those of the n
// rows with keep[i] set, or all n when keep is nil.
func (cp *csvPlan) appendPass(b *builder, keep []bool, n int) error {
	for i := 0; i < n; i++ {
		if keep != nil && !keep[i] {
			continue
		}
		if cp.idP != nil {
			if err := cp.idP.appendCSVID(cp.ids[i], b.seen+int64(i)+1); err != nil {
				return err
			}
		}
		if cp.labelP != nil {
			cp.labelP.col.Strings = append(cp.labelP.col.Strings, cp.labels[i])
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
				setMark(j, floatReason(row[j]), "")
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
	if p.col.Ints != nil {
		if v, ok := parseCanonicalInt(s); ok {
			p.col.Ints = append(p.col.Ints, v)
			return nil
		}
		strs := make([]string, len(p.col.Ints), cap(p.col.Ints))
		for i, v := range p.col.Ints {
			strs[i] = strconv.FormatInt(v, 10)
		}
		p.col.Ints, p.col.Strings = nil, strs
	}
	p.col.Strings = append(p.col.Strings, s)
	return nil
}
