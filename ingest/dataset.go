package ingest

import (
	"bytes"
	"errors"
	"io/fs"
	"net/url"
	"os"
	"path"
	"path/filepath"
	"slices"
	"strings"
)

// Dataset is the list of table files that one or more inputs name, read as one
// table: the parts' rows one after the other, in the order of Parts.
type Dataset struct {
	// Inputs are the paths, directories and glob patterns as given.
	Inputs []string
	// Parts are the table files, in reading order: the inputs in the order given,
	// the files a directory or a glob names in byte order of their paths.
	Parts []Part
	// Keys are the folder keys (hive-style "key=value" directory names below a
	// directory or glob root) found in any part, in order of first appearance.
	Keys []string
	// Ignored lists files found under a directory or by a glob that are not
	// tables by their name or first bytes (README.md, _SUCCESS, …).
	Ignored []string

	footers footerCache // Parquet footers read, for the passes that follow
}

// Part is one table file of a Dataset.
type Part struct {
	Path string
	// Keys holds the part's folder keys: Keys[k] is the value of key k, or ""
	// when the part has no such folder; Null[k] is then true.
	Keys []string
	Null []bool
}

// hiveNull is the folder value that Hive and Spark write for a null key (from
// memory: Hive's default partition name).
const hiveNull = "__HIVE_DEFAULT_PARTITION__"

// OpenDataset lists the table files named by inputs: each input is a table
// file, a directory (every table file under it, recursively), or a glob pattern
// (filepath.Match syntax in each path element, plus "**" for any number of
// directories; a matched directory contributes every table file under it).
// Within a directory or glob the files are taken in byte order of their paths;
// inputs are taken in the order given.
//
// A file under a directory or glob is a table when its name ends in .parquet,
// .pq, .arrow, .feather, .ipc, .arrows, .csv or .tsv, optionally followed by a
// compression suffix (.gz, .zst, .bz2, .xz, .lz4, .zip), or when its name has
// no extension and it begins with the Parquet or Arrow magic bytes; names
// beginning with "." or "_" (hidden files, _SUCCESS, _metadata) are passed
// over, and other files are listed in Ignored. A file named directly is always
// read. Directory names of the form key=value below a directory or glob root
// become the parts' Keys (values URL-unescaped as Hive writes them; the value
// __HIVE_DEFAULT_PARTITION__ is a null).
//
// Every problem (no inputs, a missing path, a pattern or directory that names
// no table, a file named twice) is an *InputError naming the input.
func OpenDataset(inputs ...string) (*Dataset, error) {
	if len(inputs) == 0 {
		return nil, inputErr("(no input)", "", 0, "no table named")
	}
	ds := &Dataset{Inputs: slices.Clone(inputs)}
	seen := map[string]string{}
	for _, in := range inputs {
		files, root, err := expandInput(ds, in)
		if err != nil {
			return nil, err
		}
		for _, f := range files {
			abs, err := filepath.Abs(f)
			if err != nil {
				abs = f
			}
			if first, ok := seen[abs]; ok {
				return nil, inputErr(f, "", 0, "named twice (by %q and %q): its rows would be read twice", first, in)
			}
			seen[abs] = in
			ds.addPart(f, root)
		}
	}
	return ds, nil
}

// expandInput returns the table files one input names, and the root below
// which folder names are keys ("" for a file named directly).
func expandInput(ds *Dataset, in string) (files []string, root string, err error) {
	st, statErr := os.Stat(in)
	switch {
	case statErr == nil && st.IsDir():
		files, err = ds.walk(in, nil)
		if err == nil && len(files) == 0 {
			err = inputErr(in, "", 0, "directory holds no Parquet, Arrow or CSV files")
		}
		return files, in, err
	case statErr == nil:
		return []string{in}, "", nil
	case isGlob(in):
		root, pattern := splitGlob(in)
		if _, err := path.Match(filepath.ToSlash(pattern), ""); err != nil {
			return nil, "", inputErr(in, "", 0, "bad pattern: %v", err)
		}
		files, err = ds.walk(root, strings.Split(filepath.ToSlash(pattern), "/"))
		if err == nil && len(files) == 0 {
			err = inputErr(in, "", 0, "pattern matches no Parquet, Arrow or CSV file")
		}
		return files, root, err
	}
	return nil, "", wrapInputErr(in, "", 0, unwrapPathErr(statErr), "cannot open")
}

// isGlob reports whether p holds filepath.Match meta characters.
func isGlob(p string) bool { return strings.ContainsAny(p, "*?[") }

// splitGlob splits a pattern into its leading directories without meta
// characters (the root, "." when none) and the rest.
func splitGlob(p string) (root, rest string) {
	parts := strings.Split(filepath.ToSlash(p), "/")
	k := 0
	for k < len(parts)-1 && !isGlob(parts[k]) {
		k++
	}
	root = strings.Join(parts[:k], "/")
	switch {
	case root == "" && strings.HasPrefix(p, "/"):
		root = "/"
	case root == "":
		root = "."
	}
	return filepath.FromSlash(root), strings.Join(parts[k:], "/")
}

// walk returns the table files under root in byte order of their paths; with a
// pattern (path elements), only those whose path below root matches it, or
// that lie under a directory that matches it.
func (ds *Dataset) walk(root string, pattern []string) ([]string, error) {
	var files []string
	start := root
	if fi, err := os.Lstat(root); err == nil && fi.Mode()&fs.ModeSymlink != 0 {
		start = root + string(filepath.Separator) // follow a linked root
	}
	err := filepath.WalkDir(start, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return wrapInputErr(p, "", 0, unwrapPathErr(err), "cannot list")
		}
		rel, _ := filepath.Rel(root, p)
		name := d.Name()
		if p != start && (strings.HasPrefix(name, ".") || strings.HasPrefix(name, "_")) {
			if d.IsDir() {
				return fs.SkipDir
			}
			return nil
		}
		if d.IsDir() {
			if pattern != nil && p != start && matchPath(pattern, strings.Split(filepath.ToSlash(rel), "/")) {
				under, err := ds.walk(p, nil)
				files = append(files, under...)
				if err != nil {
					return err
				}
				return fs.SkipDir
			}
			return nil
		}
		if pattern != nil && !matchPath(pattern, strings.Split(filepath.ToSlash(rel), "/")) {
			return nil
		}
		if isTableFile(p, name) {
			files = append(files, p)
		} else {
			ds.Ignored = append(ds.Ignored, p)
		}
		return nil
	})
	slices.SortFunc(files, func(a, b string) int { return strings.Compare(filepath.ToSlash(a), filepath.ToSlash(b)) })
	return slices.Compact(files), err
}

// matchPath matches path elements against pattern elements, where "**"
// matches any number of elements (none included).
func matchPath(pattern, elems []string) bool {
	if len(pattern) == 0 {
		return len(elems) == 0
	}
	if pattern[0] == "**" {
		for k := 0; k <= len(elems); k++ {
			if matchPath(pattern[1:], elems[k:]) {
				return true
			}
		}
		return false
	}
	if len(elems) == 0 {
		return false
	}
	ok, _ := path.Match(pattern[0], elems[0])
	return ok && matchPath(pattern[1:], elems[1:])
}

var (
	tableExts    = []string{".parquet", ".pq", ".arrow", ".feather", ".ipc", ".arrows", ".csv", ".tsv"}
	compressExts = []string{".gz", ".zst", ".bz2", ".xz", ".lz4", ".zip"}
)

// stripCompression returns name without a compression suffix, and the suffix.
func stripCompression(name string) (string, string) {
	l := strings.ToLower(name)
	for _, c := range compressExts {
		if strings.HasSuffix(l, c) {
			return name[:len(name)-len(c)], c
		}
	}
	return name, ""
}

// isTableFile tells whether the file p (named name) under a directory is a
// table: by its extension, or, with none, by its magic bytes.
func isTableFile(p, name string) bool {
	base, _ := stripCompression(name)
	l := strings.ToLower(base)
	for _, e := range tableExts {
		if strings.HasSuffix(l, e) {
			return true
		}
	}
	if strings.Contains(name, ".") {
		return false
	}
	f, err := os.Open(p)
	if err != nil {
		return false
	}
	defer f.Close()
	var head [6]byte
	n, _ := f.Read(head[:])
	h := head[:n]
	return bytes.HasPrefix(h, parquetMagic) || bytes.HasPrefix(h, arrowMagic) || bytes.HasPrefix(h, streamMagic)
}

// addPart appends file f, with the folder keys of its directories below root.
func (ds *Dataset) addPart(f, root string) {
	p := Part{Path: f}
	if root != "" {
		rel, err := filepath.Rel(root, filepath.Dir(f))
		if err == nil && rel != "." {
			for _, dir := range strings.Split(filepath.ToSlash(rel), "/") {
				key, val, ok := strings.Cut(dir, "=")
				if !ok || key == "" {
					continue
				}
				if u, err := url.PathUnescape(val); err == nil {
					val = u
				}
				k := slices.Index(ds.Keys, key)
				if k < 0 {
					k = len(ds.Keys)
					ds.Keys = append(ds.Keys, key)
					for i := range ds.Parts {
						ds.Parts[i].Keys = append(ds.Parts[i].Keys, "")
						ds.Parts[i].Null = append(ds.Parts[i].Null, true)
					}
				}
				p.setKey(k, len(ds.Keys), val)
			}
		}
	}
	for len(p.Keys) < len(ds.Keys) {
		p.Keys = append(p.Keys, "")
		p.Null = append(p.Null, true)
	}
	ds.Parts = append(ds.Parts, p)
}

func (p *Part) setKey(k, n int, val string) {
	for len(p.Keys) < n {
		p.Keys = append(p.Keys, "")
		p.Null = append(p.Null, true)
	}
	p.Keys[k], p.Null[k] = val, val == hiveNull
	if p.Null[k] {
		p.Keys[k] = ""
	}
}

// Files returns the paths of the parts, in reading order.
func (ds *Dataset) Files() []string {
	out := make([]string, len(ds.Parts))
	for i, p := range ds.Parts {
		out[i] = p.Path
	}
	return out
}

// errNoParts is returned by readers given an empty Dataset.
var errNoParts = errors.New("dataset has no parts")
