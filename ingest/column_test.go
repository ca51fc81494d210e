package ingest

import (
	"slices"
	"strconv"
	"testing"
)

// TestFindDuplicates: values occurring more than once are counted with their
// rows, named in order of first occurrence; nulls are not values
// (hand-worked).
func TestFindDuplicates(t *testing.T) {
	strs := &Column{Strings: []string{"b", "a", "c", "a", "b", "b", "", "d", ""}, Null: []bool{false, false, false, false, false, false, true, false, true}}
	d := FindDuplicates(strs, 1)
	if d.Values != 2 || d.Rows != 5 || !slices.Equal(d.First, []string{"b"}) {
		t.Errorf("%+v", d)
	}
	ints := &Column{Ints: []int64{5, 3, 5, 9, 3, 1}}
	if d := FindDuplicates(ints, 5); d.Values != 2 || d.Rows != 4 || !slices.Equal(d.First, []string{"5", "3"}) {
		t.Errorf("%+v", d)
	}
	if d := FindDuplicates(&Column{Ints: []int64{1, 2}}, 5); d.Values != 0 || d.First != nil {
		t.Errorf("%+v", d)
	}
}

// TestFewValues: integer feature columns with at most FewDistinct distinct
// values among the kept rows are listed with their values; float columns and
// integer columns with more values are not; CSV labels that are integers stay
// integers, an empty label cell is a null.
func TestFewValues(t *testing.T) {
	text := "batch,x,n,kind\n"
	for i := range 30 {
		kind := []string{"1", "2", ""}[i%3]
		text += strconv.Itoa(i%3+1) + "," + strconv.Itoa(i) + ".5," + strconv.Itoa(i) + "," + kind + "\n"
	}
	got, err := Read(writeTemp(t, "few.csv", []byte(text)), Options{Label: "kind"})
	if err != nil {
		t.Fatal(err)
	}
	if len(got.FewValues) != 1 || got.FewValues[0].Column != "batch" || !slices.Equal(got.FewValues[0].Values, []float32{1, 2, 3}) {
		t.Errorf("few values %+v", got.FewValues)
	}
	if got.Label.Ints == nil || got.Label.Ints[1] != 2 || !got.Label.IsNull(2) || got.Label.String(2) != "" {
		t.Errorf("label %+v", got.Label)
	}
}
