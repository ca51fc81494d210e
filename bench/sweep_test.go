package bench

import (
	"bytes"
	"encoding/csv"
	"math"
	"strings"
	"testing"
)

func TestSweepReports(t *testing.T) {
	nan := math.NaN()
	rs := []Result{
		{Name: "theta=0.5", Values: []string{"0.5"}, Rows: 1000, Seconds: 12.5, KNNSecs: 1, OptSecs: 10, PeakMem: 300 << 20,
			Recall: nan, Trust: 0.98765, Cont: 0.97, Preserve: 0.5, LabelAcc: 0.95, InputAcc: 0.96, KL: 1.25},
		{Name: "theta=1", Values: []string{"1"}, Rows: 1000, Recall: nan, Trust: nan, Cont: nan, Preserve: nan, LabelAcc: nan, InputAcc: nan, KL: nan, Err: "exit status 2"},
	}
	meta := Meta{Dataset: "demo", Rows: 1000, K: 10, Cores: 2, GoVersion: "go1.x", Date: "2026-12-01"}
	var b bytes.Buffer
	if err := WriteCSV(&b, meta, []string{"theta"}, rs); err != nil {
		t.Fatal(err)
	}
	lines := strings.SplitN(b.String(), "\n", 2)
	if !strings.Contains(lines[0], "2 cores") || !strings.Contains(lines[0], "go1.x") {
		t.Errorf("CSV header %q lacks the machine", lines[0])
	}
	recs, err := csv.NewReader(strings.NewReader(lines[1])).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(recs) != 3 || recs[0][1] != "theta" || recs[1][1] != "0.5" || recs[1][8] != "0.9877" || recs[2][8] != "" {
		t.Errorf("CSV rows: %q", recs)
	}
	if recs[1][6] != "300" { // peak MiB
		t.Errorf("peak MiB = %q, want 300", recs[1][6])
	}
	b.Reset()
	if err := WriteMarkdown(&b, meta, []string{"theta"}, rs); err != nil {
		t.Fatal(err)
	}
	md := b.String()
	if !strings.Contains(md, "| theta | wall s |") || !strings.Contains(md, "| 0.5 | 12.50 |") || !strings.Contains(md, "exit status 2") {
		t.Errorf("Markdown:\n%s", md)
	}
}
