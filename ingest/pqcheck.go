package ingest

import (
	"github.com/apache/arrow/go/v17/parquet/metadata"
)

// maxRowsPerByte bounds the rows a Parquet file may announce per byte of file.
// Run-length encoding lets a column of one repeated value take almost no space,
// but a table whose rows outnumber its bytes a thousandfold holds nothing worth
// mapping, and a damaged or hostile footer could otherwise make the reader
// produce rows without end.
const maxRowsPerByte = 1024

// checkParquetMeta checks the row counts of a Parquet footer before any page is
// read (Apache Parquet format specification, FileMetaData, RowGroup and
// ColumnMetaData): every row group announces 0 or more rows, each of its flat
// column chunks holds exactly that many values (nulls included) and each
// repeated one at least that many levels, the row groups add up to the file's
// row count, and the file holds at most maxRowsPerByte rows per byte.
func checkParquetMeta(path string, md *metadata.FileMetaData, size int64) error {
	var sum int64
	for g := range len(md.RowGroups) {
		rg := md.RowGroup(g)
		n := rg.NumRows()
		if n < 0 {
			return inputErr(path, "", 0, "corrupt Parquet metadata: row group %d announces %d rows", g, n)
		}
		for c := 0; c < rg.NumColumns(); c++ {
			cc, err := rg.ColumnChunk(c)
			if err != nil {
				return wrapInputErr(path, "", 0, err, "corrupt Parquet metadata: row group %d, column chunk %d", g, c)
			}
			col := md.Schema.Column(c)
			v := cc.NumValues()
			flat := col.MaxRepetitionLevel() == 0
			if (flat && v != n) || (!flat && v < n) {
				return inputErr(path, col.Path(), 0, "corrupt Parquet metadata: row group %d announces %d rows, but the column chunk holds %d values", g, n, v)
			}
		}
		if sum > md.NumRows-n && n > 0 {
			break // the totals disagree; reported below
		}
		sum += n
	}
	if sum != md.NumRows {
		return inputErr(path, "", 0, "corrupt Parquet metadata: the file announces %d rows, its row groups %d", md.NumRows, sum)
	}
	if md.NumRows > maxRowsPerByte*max(size, 1) {
		return inputErr(path, "", 0, "Parquet metadata announces %d rows in a file of %d bytes (more than %d rows per byte): damaged or hostile file", md.NumRows, size, maxRowsPerByte)
	}
	return nil
}
