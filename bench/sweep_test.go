package bench

import (
	"bytes"
	"encoding/csv"
	"math"
	"strings"
	"testing"
)

func result(name, val, pkey string, secs float64, mem int64, trust, kl float64, err string) Result {
	nan := math.NaN()
	return Result{Name: name, Values: []string{val}, Rows: 1000, Seconds: secs, KNNSecs: 1, OptSecs: secs - 2, AffSecs: 0.5, PeakMem: mem,
		Recall: nan, Trust: trust, Cont: 0.97, Preserve: 0.5, LabelAcc: 0.95, InputAcc: 0.96, KL: kl, IterSecs: nan, Centroid: nan,
		Load: 0.3, OtherCPU: 0.1, PKey: pkey, Err: err}
}

func readCSV(t *testing.T, text string) (string, [][]string, map[string]int) {
	t.Helper()
	head, body, _ := strings.Cut(text, "\n")
	recs, err := csv.NewReader(strings.NewReader(body)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	col := map[string]int{}
	for i, h := range recs[0] {
		col[h] = i
	}
	return head, recs, col
}

func TestSummariseMediansAndSpread(t *testing.T) {
	rs := []Result{
		result("theta=0.5", "0.5", "p30", 12, 300<<20, 0.98, 1.25, ""),
		result("theta=1", "1", "p30", 8, 290<<20, 0.97, 1.30, ""),
		result("theta=0.5", "0.5", "p30", 10, 310<<20, 0.98, 1.25, ""),
		result("theta=1", "1", "p30", 9, 295<<20, 0.97, 1.30, ""),
		result("theta=0.5", "0.5", "p30", 15, 305<<20, 0.98, 1.25, ""),
		result("theta=1", "1", "p30", 0, 0, math.NaN(), math.NaN(), "exit status 2"),
	}
	sums := Summarise(rs)
	if len(sums) != 2 || sums[0].Name != "theta=0.5" || sums[1].Name != "theta=1" {
		t.Fatalf("summaries %+v", sums)
	}
	a, b := sums[0], sums[1]
	if a.Seconds != 12 || a.SecondsMin != 10 || a.SecondsMax != 15 || a.Runs != 3 || a.PeakMem != 305<<20 || a.MemMin != 300<<20 || a.MemMax != 310<<20 {
		t.Errorf("theta=0.5: %+v", a)
	}
	if b.Seconds != 8.5 || b.Runs != 2 || b.Failed != 1 || !strings.Contains(b.Err, "1 of 3 runs failed") {
		t.Errorf("theta=1: median %g, runs %d, failed %d, err %q", b.Seconds, b.Runs, b.Failed, b.Err)
	}
	if !a.ShowKL || !b.ShowKL || a.PGroup != "A" || b.PGroup != "A" || KLNote(sums) != "" {
		t.Errorf("one P: groups %q %q, show %v %v, note %q", a.PGroup, b.PGroup, a.ShowKL, b.ShowKL, KLNote(sums))
	}
	meta := Meta{Dataset: "demo", Rows: 1000, K: 10, Cores: 2, GoVersion: "go1.x", Date: "2026-12-01", Repeats: 3, Order: "interleaved", Warmup: 1, LoadStart: 0.25, LoadEnd: 1.5}
	var buf bytes.Buffer
	if err := WriteCSV(&buf, meta, []string{"theta"}, sums); err != nil {
		t.Fatal(err)
	}
	head, recs, col := readCSV(t, buf.String())
	if !strings.Contains(head, "2 cores") || !strings.Contains(head, "3 run(s) per setting, interleaved") || !strings.Contains(head, "0.25 at the start, 1.50 at the end") {
		t.Errorf("CSV header %q", head)
	}
	want := map[string]string{"seconds_median": "12.00", "seconds_min": "10.00", "seconds_max": "15.00", "seconds_spread_pct": "41.7",
		"peak_memory_mib_median": "305", "peak_memory_mib_min": "300", "peak_memory_mib_max": "310", "runs": "3", "trustworthiness": "0.9800", "kl": "1.2500", "p_group": "A"}
	for k, v := range want {
		if got := recs[1][col[k]]; got != v {
			t.Errorf("%s = %q, want %q", k, got, v)
		}
	}
	buf.Reset()
	if err := WriteMarkdown(&buf, meta, []string{"theta"}, sums); err != nil {
		t.Fatal(err)
	}
	md := buf.String()
	for _, s := range []string{"| theta | wall s (median) | fastest–slowest s |", "| 0.5 | 12.00 | 10.00–15.00 |", "1 of 3 runs failed", "3 per setting, interleaved"} {
		if !strings.Contains(md, s) {
			t.Errorf("Markdown lacks %q:\n%s", s, md)
		}
	}
	buf.Reset()
	if err := WriteRunsCSV(&buf, meta, []string{"theta"}, rs); err != nil {
		t.Fatal(err)
	}
	if _, recs, col := readCSV(t, buf.String()); len(recs) != 7 || recs[6][col["error"]] != "exit status 2" || recs[1][col["load_1min"]] != "0.30" {
		t.Errorf("runs CSV %q", recs)
	}
}

// TestKLLikeWithLike: KL is shown only where another setting shares P.
func TestKLLikeWithLike(t *testing.T) {
	rs := []Result{
		result("perplexity=10 theta=0.5", "a", "p10", 5, 1, 0.98, 1.5, ""),
		result("perplexity=10 theta=1", "b", "p10", 4, 1, 0.97, 1.6, ""),
		result("perplexity=30 theta=0.5", "c", "p30", 6, 1, 0.99, 1.2, ""),
	}
	sums := Summarise(rs)
	if sums[0].PGroup != "A" || sums[1].PGroup != "A" || sums[2].PGroup != "B" {
		t.Fatalf("groups %q %q %q", sums[0].PGroup, sums[1].PGroup, sums[2].PGroup)
	}
	if !sums[0].ShowKL || !sums[1].ShowKL || sums[2].ShowKL {
		t.Errorf("show KL %v %v %v", sums[0].ShowKL, sums[1].ShowKL, sums[2].ShowKL)
	}
	if n := KLNote(sums); !strings.Contains(n, "perplexity=30 theta=0.5") || !strings.Contains(n, "trustworthiness") {
		t.Errorf("note %q", n)
	}
	var buf bytes.Buffer
	if err := WriteCSV(&buf, Meta{}, []string{"x"}, sums); err != nil {
		t.Fatal(err)
	}
	if _, recs, col := readCSV(t, buf.String()); recs[3][col["kl"]] != "" || recs[1][col["kl"]] != "1.5000" {
		t.Errorf("kl column %q %q", recs[1][col["kl"]], recs[3][col["kl"]])
	}
}
