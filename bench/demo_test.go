package bench

import (
	"bytes"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"testing"

	"nightjar/ingest"
)

func TestDemoShape(t *testing.T) {
	tests := []struct {
		n    int
		seed uint64
	}{{1, 1}, {1000, 2}, {20000, 3}}
	for _, tc := range tests {
		t.Run(fmt.Sprint(tc.n), func(t *testing.T) {
			tb := Demo(tc.n, tc.seed, 2)
			if tb.N != tc.n || tb.D != DemoFeatures || len(tb.Data) != tc.n*DemoFeatures {
				t.Fatalf("matrix %d×%d with %d values, want %d×%d", tb.N, tb.D, len(tb.Data), tc.n, DemoFeatures)
			}
			if len(tb.Features) != DemoFeatures || tb.Features[0] != "f01" || tb.Features[49] != "f50" {
				t.Fatalf("feature names %v", tb.Features)
			}
			if tb.ID.Len() != tc.n || tb.Label.Len() != tc.n || tb.Label.Strings == nil || tb.ID.Ints == nil {
				t.Fatalf("id/label columns of lengths %d/%d", tb.ID.Len(), tb.Label.Len())
			}
			for i, id := range tb.ID.Ints {
				if id != int64(i+1) {
					t.Fatalf("id[%d] = %d, want %d", i, id, i+1)
				}
			}
			known := DemoLabels()
			for i, l := range tb.Label.Strings {
				if !slices.Contains(known, l) {
					t.Fatalf("row %d has unknown label %q", i, l)
				}
			}
			for i, v := range tb.Data {
				if math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
					t.Fatalf("value %d is %v", i, v)
				}
			}
		})
	}
}

func TestDemoCounts(t *testing.T) {
	for _, n := range []int{1000, 12345, 1_000_000} {
		counts := demoCounts(n)
		sum := 0
		for _, c := range counts {
			sum += c
		}
		if sum != n {
			t.Fatalf("n=%d: counts add up to %d", n, sum)
		}
		if len(counts) < 12 {
			t.Fatalf("only %d groups", len(counts))
		}
		rare := counts[demoRare]
		if rare == 0 || float64(rare) >= 0.005*float64(n) {
			t.Fatalf("n=%d: rare group has %d rows, want 0 < rows < 0.5%%", n, rare)
		}
		if demoPops[demoRare].name != DemoRareLabel {
			t.Fatalf("rare index points at %q", demoPops[demoRare].name)
		}
	}
}

func TestDemoDeterministic(t *testing.T) {
	a := Demo(30000, 11, 3)
	for _, threads := range []int{1, 2, 0} {
		b := Demo(30000, 11, threads)
		if !slices.Equal(a.Data, b.Data) || !slices.Equal(a.Label.Strings, b.Label.Strings) {
			t.Fatalf("same (n, seed) gave different tables with %d and 3 threads", threads)
		}
	}
	c := Demo(30000, 12, 2)
	if slices.Equal(a.Data, c.Data) {
		t.Fatal("different seeds gave the same table")
	}
	// A prefix of a bigger table is not promised, but the first rows of the same
	// n must not depend on anything else: draw again and compare.
	d := Demo(30000, 11, 2)
	if !slices.Equal(a.Data, d.Data) {
		t.Fatal("two calls differ")
	}
}

// The features are PC-like: variance falls from the first features to the last.
func TestDemoVarianceDecays(t *testing.T) {
	tb := Demo(20000, 5, 2)
	v := make([]float64, DemoFeatures)
	mean := make([]float64, DemoFeatures)
	for i := range tb.N {
		for f := range DemoFeatures {
			mean[f] += float64(tb.Data[i*DemoFeatures+f]) / float64(tb.N)
		}
	}
	for i := range tb.N {
		for f := range DemoFeatures {
			d := float64(tb.Data[i*DemoFeatures+f]) - mean[f]
			v[f] += d * d / float64(tb.N)
		}
	}
	head, tail := 0.0, 0.0
	for f := range 10 {
		head += v[f]
		tail += v[DemoFeatures-10+f]
	}
	if head < 100*tail {
		t.Fatalf("variance of first 10 features %.3g, of last 10 %.3g: want a decay of 100× or more", head, tail)
	}
	for f, x := range v {
		if x <= 0 {
			t.Fatalf("feature %d has no variance", f)
		}
	}
}

// The rare group is an island: every rare row is closer to all other rare rows
// than to any row of another group. The stem and arms of a lineage touch.
func TestDemoGeometry(t *testing.T) {
	tb := Demo(20000, 8, 2)
	x := tb.Matrix
	byLabel := map[string][]int{}
	for i, l := range tb.Label.Strings {
		byLabel[l] = append(byLabel[l], i)
	}
	dist := func(i, j int) float64 {
		var s float64
		for f := range x.D {
			d := float64(x.Data[i*x.D+f] - x.Data[j*x.D+f])
			s += d * d
		}
		return math.Sqrt(s)
	}
	minCross := func(a, b []int) float64 {
		m := math.Inf(1)
		for _, i := range a {
			for _, j := range b {
				m = math.Min(m, dist(i, j))
			}
		}
		return m
	}
	rare := byLabel[DemoRareLabel]
	var others []int
	for i, l := range tb.Label.Strings {
		if l != DemoRareLabel {
			others = append(others, i)
		}
	}
	maxIn := 0.0
	for _, i := range rare {
		for _, j := range rare {
			maxIn = math.Max(maxIn, dist(i, j))
		}
	}
	if out := minCross(rare, others); out < 3*maxIn {
		t.Errorf("rare group: diameter %.2f, nearest other row %.2f; want the gap ≥ 3× the diameter", maxIn, out)
	}
	for _, lin := range []string{"veilweed", "sunthread"} {
		var stem, arm1, arm2 string
		for _, p := range demoPops {
			if len(p.name) > len(lin) && p.name[:len(lin)] == lin {
				switch p.segment {
				case 0:
					stem = p.name
				case 1:
					arm1 = p.name
				case 2:
					arm2 = p.name
				}
			}
		}
		for _, arm := range []string{arm1, arm2} {
			if d := minCross(byLabel[stem], byLabel[arm]); d > 1.0 {
				t.Errorf("%s and %s are %.2f apart, want them joined (< 1)", stem, arm, d)
			}
		}
	}
}

func BenchmarkDemoMillion(b *testing.B) {
	for b.Loop() {
		Demo(1_000_000, 1, 2)
	}
}

func ExampleDemo() {
	tb := Demo(10000, 42, 2)
	fmt.Println(tb.N, tb.D, tb.Features[0], tb.Label.Name, tb.ID.Ints[0])
	// Output: 10000 50 f01 population 1
}

// The demo table survives a round trip through ingest's Parquet writer and
// reader, and its Hash equals the fingerprint ingest computes when reading the
// file (the definition on ingest.Table.Hash).
func TestDemoRoundTripThroughIngest(t *testing.T) {
	tb := Demo(3000, 4, 2)
	path := filepath.Join(t.TempDir(), "demo.parquet")
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := ingest.WriteTable(f, tb); err != nil {
		t.Fatal(err)
	}
	if err := f.Close(); err != nil {
		t.Fatal(err)
	}
	back, err := ingest.Read(path, ingest.Options{ID: "id", Label: "population"})
	if err != nil {
		t.Fatal(err)
	}
	if back.Hash != tb.Hash {
		t.Errorf("hash after reading %s, demo says %s", back.Hash, tb.Hash)
	}
	if !slices.Equal(back.Data, tb.Data) || !slices.Equal(back.Features, tb.Features) ||
		!slices.Equal(back.Label.Strings, tb.Label.Strings) || !slices.Equal(back.ID.Ints, tb.ID.Ints) {
		t.Error("table changed in the round trip")
	}
}

// TestWriteDemoParts: the demo written part by part has the bytes of
// ingest.WriteTable on Demo's whole table (the reference): three parts, the
// last one short, each drawing its blocks with the generators Demo gives
// them.
func TestWriteDemoParts(t *testing.T) {
	defer func(r int) { demoWriteRows = r }(demoWriteRows)
	demoWriteRows = ingest.WriteChunkRows
	n := 2*ingest.WriteChunkRows + 5000
	var want, got bytes.Buffer
	if err := ingest.WriteTable(&want, Demo(n, 7, 3)); err != nil {
		t.Fatal(err)
	}
	if err := WriteDemo(&got, n, 7, 2); err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got.Bytes(), want.Bytes()) {
		t.Errorf("WriteDemo wrote %d bytes unlike the whole table's %d", got.Len(), want.Len())
	}
	if err := WriteDemo(&got, 0, 7, 2); err == nil {
		t.Error("WriteDemo of 0 rows: no error")
	}
}
