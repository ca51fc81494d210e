package nightjar

import (
	"context"
	"fmt"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"nightjar/checkpoint"
	"nightjar/internal/figure"
)

// smallRun embeds n invented rows (three groups) from a CSV file with an id
// column "cell", a label "kind", a numeric column "depth" that is not a
// feature, and returns the run directory and the CSV's path. With bad, row
// 5 (0-based) has an empty feature and the run skips it.
func smallRun(t *testing.T, n int, withID, bad bool) (dir, csvPath string) {
	t.Helper()
	tmp := t.TempDir()
	x, lab := blobs(n, 4, 11)
	var b strings.Builder
	b.WriteString("cell,kind,depth,f1,f2,f3,f4\n")
	for i := range n {
		fmt.Fprintf(&b, "c%03d,%s,%d", i, lab.Strings[i], i)
		for j := range 4 {
			if bad && i == 5 && j == 2 {
				b.WriteString(",")
				continue
			}
			fmt.Fprintf(&b, ",%g", x.Data[i*4+j])
		}
		b.WriteString("\n")
	}
	csvPath = filepath.Join(tmp, "cells.csv")
	if err := os.WriteFile(csvPath, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	s := DefaultSettings()
	s.Perplexity, s.Iterations, s.EarlyIterations = 10, 120, 40
	s.Features = []string{"f*"}
	s.Label, s.SkipInvalid = "kind", bad
	if withID {
		s.ID = "cell"
	}
	rt := DefaultRuntime()
	rt.ScoreSample = 0
	dir = filepath.Join(tmp, "run")
	if _, err := Embed(context.Background(), FromFile(csvPath), dir, s, rt, nil); err != nil {
		t.Fatal(err)
	}
	return dir, csvPath
}

// openRun opens the run directory dir for reading.
func openRun(t *testing.T, dir string) *checkpoint.Run {
	t.Helper()
	run, err := checkpoint.Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	return run
}

// notes collects an Observer's warnings and notes.
type notes struct {
	quietObserver
	warn, note []string
}

func (o *notes) Warn(s string) { o.warn = append(o.warn, s) }
func (o *notes) Note(s string) { o.note = append(o.note, s) }

func TestRunWritesMapPage(t *testing.T) {
	dir, _ := smallRun(t, 150, true, false)
	for _, f := range []string{FileMap, FileMapPage} {
		if _, err := os.Stat(filepath.Join(dir, f)); err != nil {
			t.Fatalf("run wrote no %s: %v", f, err)
		}
	}
	html, _ := os.ReadFile(filepath.Join(dir, FileMapPage))
	if !strings.Contains(string(html), `"heading":"kind"`) || !strings.Contains(string(html), `"title":"nightjar map of cells.csv, coloured by kind"`) {
		t.Errorf("page header lacks the title or heading")
	}
}

func TestRedrawByInputColumns(t *testing.T) {
	dir, _ := smallRun(t, 150, true, false)
	ctx := context.Background()
	obs := &notes{}
	res, err := Redraw(ctx, dir, RedrawOptions{By: "depth"}, obs)
	if err != nil {
		t.Fatal(err)
	}
	if !res.Numeric || res.Matched != 150 || res.MatchedOn != "id" {
		t.Errorf("result %+v, want 150 rows matched on id, by number", res)
	}
	// depth is 0…149: by linear interpolation its 1st and 99th percentiles
	// are 1.49 and 147.51.
	if math.Abs(res.Scale.Lo-1.49) > 1e-9 || math.Abs(res.Scale.Hi-147.51) > 1e-9 {
		t.Errorf("scale %g–%g, want 1.49–147.51", res.Scale.Lo, res.Scale.Hi)
	}
	res, err = Redraw(ctx, dir, RedrawOptions{By: "depth", As: "category", PointSize: 4, Opacity: 0.5, Title: "by depth"}, obs)
	if err != nil || res.Numeric || res.Groups != 150 {
		t.Fatalf("as category: %+v, %v", res, err)
	}
	f, err := os.Open(res.Image)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if _, err := png.DecodeConfig(f); err != nil {
		t.Errorf("map.png: %v", err)
	}
	for _, bad := range []RedrawOptions{{By: "nope"}, {By: "depth", As: "colour"}, {Table: "x.csv"}, {By: "depth", Opacity: 2},
		{By: "depth", Table: t.TempDir(), On: "cell"}, {By: "depth", Table: filepath.Join(t.TempDir(), "missing.csv"), On: "cell"}} {
		if _, err := Redraw(ctx, dir, bad, nil); err == nil || !IsUserFault(err) {
			t.Errorf("%+v: error %v, want a user fault", bad, err)
		}
	}
}

func TestRedrawJoinsSecondTable(t *testing.T) {
	dir, _ := smallRun(t, 90, true, false)
	meta := filepath.Join(t.TempDir(), "meta.tsv")
	var b strings.Builder
	b.WriteString("barcode\tdonor\n")
	for i := 89; i >= 10; i-- { // rows 0–9 missing, order reversed
		fmt.Fprintf(&b, "c%03d\tdonor %d\n", i, i%4)
	}
	b.WriteString("c050\tduplicate\n")
	if err := os.WriteFile(meta, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	obs := &notes{}
	out := filepath.Join(t.TempDir(), "by-donor")
	res, err := Redraw(context.Background(), dir, RedrawOptions{By: "donor", Table: meta, On: "barcode", Out: out}, obs)
	if err != nil {
		t.Fatal(err)
	}
	if res.Numeric || res.Groups != 4 || res.Matched != 80 || filepath.Dir(res.Page) != out {
		t.Errorf("result %+v, want 4 donors on 80 of 90 rows, written to %s", res, out)
	}
	joined := strings.Join(obs.warn, "\n")
	if !strings.Contains(joined, "10 of 90 map rows have no value") || !strings.Contains(joined, "1 rows repeat an id") {
		t.Errorf("warnings %q", joined)
	}
}

// A run without an id that dropped a row is matched on the input row
// numbers it recorded: each map row gets its own row's value.
func TestRedrawSkipInvalidMatchesRowNumbers(t *testing.T) {
	dir, _ := smallRun(t, 60, false, true)
	run := openRun(t, dir)
	rows, known, err := loadRows(run, 59)
	if err != nil || !known || len(rows) != 59 || rows[4] != 4 || rows[5] != 6 || rows[58] != 59 {
		t.Fatalf("recorded rows %v (known %v, %v), want 0…4, 6…59", rows, known, err)
	}
	s, err := settingsOf(run)
	if err != nil {
		t.Fatal(err)
	}
	v, err := readFinishedMap(run, s)
	if err != nil {
		t.Fatal(err)
	}
	at := make([]int, 59)
	vals, err := inputColumn(run, s, &v, "depth", at, &notes{})
	if err != nil {
		t.Fatal(err)
	}
	for i, r := range at {
		if got, want := vals.number(r), float64(rows[i]); got != want {
			t.Fatalf("map row %d has depth %g, want its input row's %g", i, got, want)
		}
	}
	if _, err := Redraw(context.Background(), dir, RedrawOptions{By: "depth"}, nil); err != nil {
		t.Fatal(err)
	}
}

func TestWriteMapsWarnsOnceForMissingGlyphs(t *testing.T) {
	y := []float64{0, 0, 1, 1, 2, 0, 3, 1}
	obs := &notes{}
	v := MapView{Map: y, Dims: 2, By: "type", Labels: []string{"γδ T cell", "日本", "日本", "ok"}, IDs: &Column{Name: "id", Ints: []int64{1, 2, 3, 4}}}
	if err := WriteMaps(t.TempDir(), v, obs); err != nil {
		t.Fatal(err)
	}
	if len(obs.warn) != 1 || !strings.Contains(obs.warn[0], "U+65E5") || strings.Contains(obs.warn[0], "U+03B3") {
		t.Errorf("warnings %q, want one naming 日 and 本 but not γ", obs.warn)
	}
	// Row 0 a reference row (out of the colouring), row 2 a placed row
	// without a value: the groups are those of rows 1 and 3.
	v.Placed = []bool{false, true, true, true}
	v.NoValue = []bool{false, false, true, false}
	if err := WriteMaps(t.TempDir(), v, nil); err != nil {
		t.Fatal(err)
	}
	if c := v.colouring(); c.Codes[0] != 0 || c.Codes[2] != -1 || len(c.Groups) != 2 || c.NoValue() != 1 {
		t.Errorf("colouring %+v, want row 2 without a value and 2 groups", c)
	}
	v.Labels = v.Labels[:2]
	if err := WriteMaps(t.TempDir(), v, nil); err == nil {
		t.Error("a view with 2 labels for 4 rows was drawn")
	}
}

func TestPageRowsSample(t *testing.T) {
	all := pageRows(10, 20, 1)
	if len(all) != 10 || all[9] != 9 {
		t.Errorf("pageRows(10, 20) = %v", all)
	}
	a, b := pageRows(1000, 100, 7), pageRows(1000, 100, 7)
	if len(a) != 100 || fmt.Sprint(a) != fmt.Sprint(b) {
		t.Errorf("sample of 100 of 1000: %d rows, repeatable %v", len(a), fmt.Sprint(a) == fmt.Sprint(b))
	}
	for k := 1; k < len(a); k++ {
		if a[k] <= a[k-1] {
			t.Fatalf("sample not increasing at %d", k)
		}
	}
	if figure.Thousands(MaxPageRows) != "2,000,000" {
		t.Errorf("MaxPageRows %d", MaxPageRows)
	}
}
