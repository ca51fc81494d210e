package nightjar

import (
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestColouringLeavesReferenceOut: the reference rows of a placement take no
// part in the colouring (hand-worked: of the placed labels a, b, a, group a
// has 2 rows and b 1; of the placed values 1, NaN, 3 one has no value).
func TestColouringLeavesReferenceOut(t *testing.T) {
	placed := []bool{false, false, true, true, true}
	v := MapView{Map: make([]float64, 10), Dims: 2, Placed: placed, By: "kind", Labels: []string{"", "", "a", "b", "a"}}
	c := v.colouring()
	if len(c.Groups) != 2 || c.Groups[0].Label != "a" || c.Groups[0].Count != 2 || c.Groups[1].Count != 1 || c.NoValue() != 0 {
		t.Errorf("groups %+v, no value %d; want a:2, b:1, none without a value", c.Groups, c.NoValue())
	}
	if c.Codes[0] != 0 || c.Codes[1] != 0 || c.Codes[2] != c.Codes[4] || c.Codes[2] == c.Codes[3] {
		t.Errorf("codes %v", c.Codes)
	}
	v = MapView{Map: make([]float64, 10), Dims: 2, Placed: placed, By: "depth", Values: []float64{math.NaN(), 5, 1, math.NaN(), 3}}
	c = v.colouring()
	if c.Scale.Missing != 1 || !math.IsNaN(c.Values[1]) || c.Values[2] != 1 || c.Values[4] != 3 {
		t.Errorf("scale %+v, values %v; want one placed row without a value and the reference's values left out", c.Scale, c.Values)
	}
	// Without placed rows, nothing changes: the view's own values.
	v.Placed = nil
	if c = v.colouring(); c.Scale.Missing != 2 || c.Values[1] != 5 {
		t.Errorf("without placed flags: scale %+v, values %v", c.Scale, c.Values)
	}
}

// TestPlacementPageAndRecolour: a placement writes map.html beside map.png,
// with the placed flags and a title naming the new table and the
// reference; recolour re-draws it by a column of placed.parquet, of a
// second table joined on the id, or of the new table.
func TestPlacementPageAndRecolour(t *testing.T) {
	fx := demoPlacement(t)
	dir := filepath.Join(t.TempDir(), "week")
	res, err := Place(context.Background(), fx.ref, FromFile(fx.table), dir, DefaultPlaceSettings(), placeRuntime(2), nil)
	if err != nil {
		t.Fatal(err)
	}
	html, err := os.ReadFile(res.MapPage)
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{`"title":"nightjar: new.parquet placed into the map of ref"`, `"name":"placed"`, "12,000 placed over 2,000 reference rows", `"heading":"population"`} {
		if !strings.Contains(string(html), want) {
			t.Errorf("map.html lacks %s", want)
		}
	}
	ctx := context.Background()
	r, err := Redraw(ctx, dir, RedrawOptions{By: colShare}, nil)
	if err != nil || !r.Numeric || r.Rows != fx.newRows || r.Matched != fx.newRows {
		t.Fatalf("by %s: %+v, %v; want %d placed rows coloured by number", colShare, r, err, fx.newRows)
	}
	if !(r.Scale.Lo > 0 && r.Scale.Hi <= 1) {
		t.Errorf("vote shares scaled %g–%g, want within (0, 1]", r.Scale.Lo, r.Scale.Hi)
	}
	cols, err := readSheet(res.Placed, []string{colVoted, "id"})
	if err != nil {
		t.Fatal(err)
	}
	distinct := map[string]bool{}
	for i := range cols[0].len() {
		distinct[cols[0].key(i)] = true
	}
	if r, err = Redraw(ctx, dir, RedrawOptions{By: colVoted}, nil); err != nil || r.Numeric || r.Groups != len(distinct) {
		t.Errorf("by %s: %+v, %v; want %d categories", colVoted, r, err, len(distinct))
	}
	// A second table holding a batch for every other placed row.
	var b strings.Builder
	b.WriteString("id,batch\n")
	for i := 0; i < cols[1].len(); i += 2 {
		fmt.Fprintf(&b, "%s,plate-%d\n", cols[1].key(i), i%3)
	}
	sheet := filepath.Join(t.TempDir(), "plates.csv")
	if err := os.WriteFile(sheet, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	out := t.TempDir()
	r, err = Redraw(ctx, dir, RedrawOptions{By: "batch", Table: sheet, Out: out}, nil)
	if err != nil || r.Groups != 3 || r.Matched != fx.newRows/2 {
		t.Errorf("by batch of a second table: %+v, %v; want 3 groups, %d rows matched", r, err, fx.newRows/2)
	}
	if _, err := os.Stat(filepath.Join(out, FileMapPage)); err != nil {
		t.Error(err)
	}
	// The new table's own column, joined on the id: its features are numbers.
	if r, err = Redraw(ctx, dir, RedrawOptions{By: "f01"}, nil); err != nil || !r.Numeric || r.Matched != fx.newRows {
		t.Errorf("by the new table's f01: %+v, %v", r, err)
	}
	if _, err := Redraw(ctx, dir, RedrawOptions{By: "nope"}, nil); !IsUserFault(err) {
		t.Errorf("by a missing column: %v, want a user fault", err)
	}
}
