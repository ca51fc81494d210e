package ingest

import (
	"fmt"
	"strings"
	"testing"
)

// TestBeyondFloat32 checks one rule for finite values that overflow the
// float32 matrix, in CSV and in a float64 Parquet column: the message says
// the value is outside the float32 range (and shows it), not "+Inf"; a real
// infinity is still called +Inf. float32's largest finite value is about
// 3.4028e38 (IEEE 754 binary32 — common practice).
func TestBeyondFloat32(t *testing.T) {
	csv := "id,a,b\n1,0.5,1\n2,5e38,1\n"
	path := writeTemp(t, "big.csv", []byte(csv))
	_, err := Read(path, Options{ID: "id", Threads: 1})
	wantInputError(t, err, path, "a", 2, "outside the float32 range")
	wantInputError(t, err, path, "a", 2, `"5e38"`)

	inf := writeTemp(t, "inf.csv", []byte("id,a,b\n1,0.5,1\n2,-inf,1\n"))
	_, err = Read(inf, Options{ID: "id", Threads: 1})
	wantInputError(t, err, inf, "a", 2, "value is -Inf")

	rec := nullRecord([]int64{1, 2, 3}, nil, []float64{0.5, 1e39, 2}, nil)
	defer rec.Release()
	pq := writeParquetRecord(t, "big.parquet", rec)
	_, err = Read(pq, Options{ID: "id", Features: []string{"f", "x"}, Threads: 1})
	wantInputError(t, err, pq, "f", 2, "outside the float32 range")
}

// TestCSVNotUTF8 checks the one rule for text: a CSV is UTF-8 throughout.
// Bytes that are not UTF-8 in the first bytes make the file unrecognisable;
// further on, in an id, a label or a feature, they are refused naming the
// row and column.
func TestCSVNotUTF8(t *testing.T) {
	var b strings.Builder
	b.WriteString("id,a,b,name\n")
	for i := range 400 {
		fmt.Fprintf(&b, "%d,%d.5,1,n%d\n", i, i, i)
	}
	good := b.String()
	late := strings.Replace(good, "\n350,350.5,1,n350\n", "\n350,350.5,1,n\xff350\n", 1)
	path := writeTemp(t, "late.csv", []byte(late))
	_, err := Read(path, Options{ID: "id", Label: "name", Threads: 1})
	wantInputError(t, err, path, "name", 351, "not valid UTF-8")

	lateID := strings.Replace(good, "\n350,350.5,", "\n3\xff50,350.5,", 1)
	path = writeTemp(t, "lateid.csv", []byte(lateID))
	_, err = Read(path, Options{ID: "id", Label: "name", Threads: 1})
	if err == nil || !strings.Contains(err.Error(), "row 351") {
		t.Errorf("a non-UTF-8 id: %v", err)
	}

	early := strings.Replace(good, "id,a", "i\xffd,a", 1)
	path = writeTemp(t, "early.csv", []byte(early))
	_, err = Read(path, Options{Threads: 1})
	wantInputError(t, err, path, "", 0, "UTF-8")
}
