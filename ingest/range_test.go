package ingest

import (
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
