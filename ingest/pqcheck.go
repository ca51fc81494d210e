package ingest

import (
	"sync"
	"time"

	"github.com/apache/arrow/go/v17/parquet/metadata"
)

// footerCache keeps the checked footers (statistics dropped) of the Parquet
// parts of a dataset, so that the passes of a reduction decode each footer
// once; an entry holds only while the file's size and modification time are
// those it was read with.
type footerCache struct {
	mu sync.Mutex
	m  map[string]footerEntry
}

type footerEntry struct {
	size int64
	mod  time.Time
	md   *metadata.FileMetaData
}

func (c *footerCache) get(path string, size int64, mod time.Time) *metadata.FileMetaData {
	c.mu.Lock()
	defer c.mu.Unlock()
	if e, ok := c.m[path]; ok && e.size == size && e.mod.Equal(mod) {
		return e.md
	}
	return nil
}

func (c *footerCache) put(path string, size int64, mod time.Time, md *metadata.FileMetaData) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.m == nil {
		c.m = map[string]footerEntry{}
	}
	c.m[path] = footerEntry{size, mod, md}
}

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
	ncols := md.Schema.NumColumns()
	for g, rg := range md.RowGroups {
		n := rg.NumRows
		if n < 0 {
			return inputErr(path, "", 0, "corrupt Parquet metadata: row group %d announces %d rows", g, n)
		}
		if len(rg.Columns) != ncols {
			return inputErr(path, "", 0, "corrupt Parquet metadata: row group %d has %d column chunks for %d columns", g, len(rg.Columns), ncols)
		}
		for c, cc := range rg.Columns {
			if cc == nil || cc.MetaData == nil {
				return inputErr(path, "", 0, "corrupt Parquet metadata: row group %d, column chunk %d has no metadata", g, c)
			}
			col := md.Schema.Column(c)
			v := cc.MetaData.NumValues
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

// dropStatistics forgets the column statistics of a Parquet footer, which the
// reader does not use: Apache Thrift's Go decoder gives each of their byte
// strings a buffer of at least 512 bytes, so a wide table of many row groups
// would otherwise keep hundreds of megabytes alive while it is read (2 KiB per
// column chunk; 245,000 chunks in a 100,000 × 5,000 table of 2,048-row groups).
func dropStatistics(md *metadata.FileMetaData) {
	for _, rg := range md.RowGroups {
		for _, cc := range rg.Columns {
			if cc != nil && cc.MetaData != nil {
				cc.MetaData.Statistics = nil
				cc.MetaData.EncodingStats = nil
			}
		}
	}
}
