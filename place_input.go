package nightjar

import (
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"slices"
	"strings"

	"github.com/apache/arrow/go/v17/parquet/file"

	"nightjar/checkpoint"
	"nightjar/ingest"
)

// readNewRows reads the table of new rows: the reference's feature columns
// by name (its selection unless s.Features says otherwise), in the
// reference's order, projected like the reference when it used --reduce.
// The id and label columns default to the reference's when the new table
// has them. A missing or extra feature column is an *InputError naming it.
func readNewRows(s *PlaceSettings, ref *reference, threads int, progress func(done, total int64)) (*ingest.Table, error) {
	return readNewRowsOf(s, ref, threads, progress, func(opt ingest.Options) (*ingest.Table, error) { return ingest.Read(s.Input, opt) })
}

// readNewRowsOf is readNewRows with the table read by read.
func readNewRowsOf(s *PlaceSettings, ref *reference, threads int, progress func(done, total int64), read func(ingest.Options) (*ingest.Table, error)) (*ingest.Table, error) {
	opt := ingest.Options{Features: s.Features, ID: s.ID, Label: s.Label, SkipInvalid: s.SkipInvalid, Threads: threads, Progress: progress}
	if len(opt.Features) == 0 {
		opt.Features = ref.s.Features
	}
	// The reference's id and label columns, when the user named none and
	// the new table has them.
	defID, defLabel := s.ID == "" && ref.s.ID != "", s.Label == "" && ref.s.Label != ""
	if defID {
		opt.ID = ref.s.ID
	}
	if defLabel {
		opt.Label = ref.s.Label
	}
	var t *ingest.Table
	var err error
	for {
		t, err = read(opt)
		var in *ingest.InputError
		if err == nil || !errors.As(err, &in) || !strings.HasPrefix(in.Reason, "no such column") {
			break
		}
		switch {
		case defID && in.Column == opt.ID:
			opt.ID, defID = "", false
		case defLabel && in.Column == opt.Label:
			opt.Label, defLabel = "", false
		default:
			return nil, featureError(s.Input, ref, err)
		}
	}
	if err != nil {
		return nil, err
	}
	if t.ID != nil {
		s.ID = t.ID.Name
	}
	if t.Label != nil {
		s.Label = t.Label.Name
	}
	want := ref.feat.Names
	if ref.feat.PCA != nil {
		want = ref.feat.SourceNames
	}
	if err := matchFeatures(s.Input, t, want, ref); err != nil {
		return nil, err
	}
	if p := ref.feat.PCA; p != nil {
		if t.D != p.D {
			return nil, &ingest.InputError{File: s.Input, Reason: fmt.Sprintf("has %d feature columns, the reference's projection (--reduce) takes %d", t.D, p.D)}
		}
		scores := p.Project(t.Matrix, threads)
		x := Matrix{N: t.N, D: p.K, Data: make([]float32, len(scores))}
		for i, v := range scores {
			x.Data[i] = float32(v)
		}
		t.Matrix, t.Features = x, ref.feat.Names
	}
	return t, nil
}

// featureError turns a missing feature column into a message that says it
// is one of the reference's.
func featureError(file string, ref *reference, err error) error {
	var in *ingest.InputError
	if errors.As(err, &in) && in.Column != "" {
		return &ingest.InputError{File: file, Column: in.Column, Reason: "the reference's feature column is missing from the new table (" + in.Reason + ")"}
	}
	return err
}

// matchFeatures checks that the new table's features are the reference's
// (want; nil when the reference could not tell its names, then only their
// number is checked) and puts them in the reference's order.
func matchFeatures(file string, t *ingest.Table, want []string, ref *reference) error {
	if want == nil {
		d := ref.feat.X.D
		if ref.feat.PCA != nil {
			d = ref.feat.PCA.D
		}
		if t.D != d {
			return &ingest.InputError{File: file, Reason: fmt.Sprintf("has %d feature columns, the reference %d", t.D, d)}
		}
		return nil
	}
	for _, name := range want {
		if !slices.Contains(t.Features, name) {
			return &ingest.InputError{File: file, Column: name, Reason: fmt.Sprintf("the reference's feature column is missing from the new table (the reference has %d features, the new table %d)", len(want), t.D)}
		}
	}
	for _, name := range t.Features {
		if !slices.Contains(want, name) {
			return &ingest.InputError{File: file, Column: name, Reason: fmt.Sprintf("is a feature of the new table but not one of the reference's %d features: leave it out with --features, or name it with --id or --label", len(want))}
		}
	}
	if slices.Equal(t.Features, want) {
		return nil
	}
	at := make([]int, len(want)) // new column of each reference feature
	for j, name := range want {
		at[j] = slices.Index(t.Features, name)
	}
	row := make([]float32, t.D)
	for i := range t.N {
		r := t.Row(i)
		for j, c := range at {
			row[j] = r[c]
		}
		copy(r, row)
	}
	t.Features = slices.Clone(want)
	return nil
}

// shardRows is what a placement reads of the new table: rows [first,
// first+t.N) of the whole of n rows, and the whole's fingerprint.
type shardRows struct {
	t     *ingest.Table
	first int
	n     int
	fp    checkpoint.Fingerprint
}

// readShard reads the rows of shard s.Shard of s.Shards. A table in several
// Parquet parts (a directory or a pattern, without folder keys, and without
// --skip-invalid, which would move rows between shards) is cut by the row
// counts in the parts' metadata, and only the parts holding the shard's rows
// are read: a shard of a 10⁸-row table holds its own rows only. Its
// fingerprint is then that of the parts' files (path, size, modification
// time), the same for every shard. Otherwise the whole table is read and the
// shard's rows kept.
func readShard(s *PlaceSettings, ref *reference, threads int, progress func(done, total int64)) (*shardRows, error) {
	if s.Shards > 1 && !s.SkipInvalid {
		if sr, ok, err := readShardParts(s, ref, threads, progress); err != nil || ok {
			return sr, err
		}
	}
	t, err := readNewRows(s, ref, threads, progress)
	if err != nil {
		return nil, err
	}
	n := t.N
	lo, hi := shardRange(s, n)
	return &shardRows{t: sliceTable(t, lo, hi), first: lo, n: n, fp: fingerprint(s.Input, t.Hash)}, nil
}

// shardRange returns the rows [lo, hi) of shard s.Shard of n rows.
func shardRange(s *PlaceSettings, n int) (int, int) {
	return int(int64(s.Shard) * int64(n) / int64(s.Shards)), int(int64(s.Shard+1) * int64(n) / int64(s.Shards))
}

// readShardParts reads the shard's rows from the parts that hold them; ok is
// false when the table is not in Parquet parts without folder keys.
func readShardParts(s *PlaceSettings, ref *reference, threads int, progress func(done, total int64)) (*shardRows, bool, error) {
	ds, err := ingest.OpenDataset(s.Input)
	if err != nil || len(ds.Parts) < 2 || len(ds.Keys) > 0 {
		return nil, false, nil
	}
	counts := make([]int, len(ds.Parts))
	n := 0
	h := sha256.New()
	for i, p := range ds.Parts {
		if counts[i] = parquetRows(p.Path); counts[i] < 0 {
			return nil, false, nil
		}
		fp, err := checkpoint.FingerprintFile(p.Path)
		if err != nil {
			return nil, false, &ingest.InputError{File: p.Path, Reason: errorText(err), Err: err}
		}
		fmt.Fprintf(h, "%s\x00%d\x00%d\x00%d\n", fp.Path, fp.Size, fp.ModTime.UnixNano(), counts[i])
		n += counts[i]
	}
	lo, hi := shardRange(s, n)
	var paths []string
	first, at := -1, 0
	for i, p := range ds.Parts {
		if at < hi && at+counts[i] > lo {
			if first < 0 {
				first = at
			}
			paths = append(paths, p.Path)
		}
		at += counts[i]
	}
	if len(paths) == 0 { // an empty shard: read the first part for the columns
		paths, first = ds.Files()[:1], 0
	}
	t, err := readNewRowsOf(s, ref, threads, progress, func(opt ingest.Options) (*ingest.Table, error) {
		sub, err := ingest.OpenDataset(paths...)
		if err != nil {
			return nil, err
		}
		t, _, err := sub.Read(opt, ingest.Reduction{})
		return t, err
	})
	if err != nil {
		return nil, true, err
	}
	if lo == hi {
		first = lo
		t = sliceTable(t, 0, 0)
	} else {
		t = sliceTable(t, lo-first, hi-first)
	}
	fp := checkpoint.Fingerprint{Path: s.Input, ValuesHash: "parts:" + hex.EncodeToString(h.Sum(nil))}
	return &shardRows{t: t, first: lo, n: n, fp: fp}, true, nil
}

// parquetRows returns the rows a Parquet file's metadata announces, or −1
// for a file that is not Parquet or cannot be read.
func parquetRows(path string) int {
	pf, err := file.OpenParquetFile(path, false)
	if err != nil {
		return -1
	}
	defer pf.Close()
	return int(pf.NumRows())
}

// sliceTable returns rows [lo, hi) of t (the features copied, so that the
// rest can be collected).
func sliceTable(t *ingest.Table, lo, hi int) *ingest.Table {
	out := *t
	out.Matrix = Matrix{N: hi - lo, D: t.D, Data: append([]float32(nil), t.Data[lo*t.D:hi*t.D]...)}
	out.ID, out.Label = sliceColumn(t.ID, lo, hi), sliceColumn(t.Label, lo, hi)
	return &out
}
