package nightjar

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"nightjar/bench"
	"nightjar/checkpoint"
	"nightjar/internal/figure"
)

// WritePredictionReports writes what nightjar bench --predict produces
// into out: prediction.json (FilePrediction, for embed --prediction),
// predict.csv (one row per setting), predict.md (the predictions, then
// each setting's phases measured on the subsamples and predicted for the
// full table) and predict.png (trustworthiness against the predicted wall
// time, DrawPrediction). values holds each setting's values of keys, for
// the CSV. It reports whether it drew predict.png (it does not when no
// setting has both a prediction and a score, and removes an old one).
func WritePredictionReports(out string, pf *PredictionFile, meta bench.Meta, keys []string, values [][]string) (bool, error) {
	if err := WritePredictionFile(filepath.Join(out, FilePrediction), pf); err != nil {
		return false, err
	}
	files := []struct {
		name  string
		write func(io.Writer) error
	}{
		{"predict.csv", func(w io.Writer) error { return writePredictionCSV(w, pf, meta, keys, values) }},
		{"predict.md", func(w io.Writer) error { return writePredictionMarkdown(w, pf, meta) }},
	}
	for _, f := range files {
		if err := checkpoint.AtomicWrite(filepath.Join(out, f.name), f.write); err != nil {
			return false, fmt.Errorf("writing %s: %w", f.name, err)
		}
	}
	var pts []figure.PredictionPoint
	drawable := false
	for _, sp := range pf.Settings {
		pt := predictionPoint(sp)
		pts = append(pts, pt)
		drawable = drawable || (!math.IsNaN(pt.Seconds) && !math.IsNaN(pt.Quality))
	}
	png := filepath.Join(out, "predict.png")
	if !drawable {
		if err := os.Remove(png); err != nil && !errors.Is(err, fs.ErrNotExist) {
			return false, fmt.Errorf("removing the old predict.png: %w", err)
		}
		return false, nil
	}
	title := fmt.Sprintf("%s, %s rows: trustworthiness@%d against predicted time (%d cores)", meta.Dataset, thousands(pf.Rows), meta.K, pf.Cores)
	if err := checkpoint.AtomicWrite(png, func(w io.Writer) error {
		return figure.DrawPrediction(w, title, fmt.Sprintf("trustworthiness@%d, largest subsample (bar: all)", meta.K), pts)
	}); err != nil {
		return false, fmt.Errorf("writing predict.png: %w", err)
	}
	return true, nil
}

// predictionPoint places a setting on the chart: its predicted time and
// the trustworthiness of its largest subsample, with the range over all.
func predictionPoint(sp SettingPrediction) figure.PredictionPoint {
	nan := math.NaN()
	pt := figure.PredictionPoint{Name: sp.Name, Seconds: nan, Low: nan, High: nan, Quality: nan, QualityLo: nan, QualityHi: nan}
	if sp.Seconds.Refused == "" && sp.Seconds.Value > 0 {
		pt.Seconds, pt.Low, pt.High = sp.Seconds.Value, sp.Seconds.Low, sp.Seconds.High
	}
	var ts []float64
	for _, q := range sp.Quality {
		if q.Trustworthiness != nil {
			ts = append(ts, *q.Trustworthiness)
			pt.Quality = *q.Trustworthiness
		}
	}
	if len(ts) > 1 {
		pt.QualityLo, pt.QualityHi = bench.Spread(ts)
	}
	return pt
}

func writePredictionCSV(w io.Writer, pf *PredictionFile, meta bench.Meta, keys []string, values [][]string) error {
	if _, err := fmt.Fprintf(w, "# prediction for %s, %d rows, from subsamples of %s rows; %d cores; %s; %s\n",
		meta.Dataset, pf.Rows, intList(pf.Ladder), pf.Cores, meta.GoVersion, meta.Date); err != nil {
		return err
	}
	cw := csv.NewWriter(w)
	head := append(append([]string{"name"}, keys...), "rows", "seconds", "seconds_low", "seconds_high",
		"peak_memory_mib", "peak_memory_mib_low", "peak_memory_mib_high", "refused",
		"trustworthiness_largest_subsample", "trustworthiness_per_tenfold_rows", "ladder_seconds")
	if err := cw.Write(head); err != nil {
		return err
	}
	for i, sp := range pf.Settings {
		mem := func(v float64) string { return strconv.FormatFloat(v/(1<<20), 'f', 0, 64) }
		row := append([]string{sp.Name}, values[i]...)
		row = append(row, strconv.Itoa(pf.Rows))
		if r := sp.Seconds; r.Refused == "" {
			row = append(row, fmtF(r.Value, 0), fmtF(r.Low, 0), fmtF(r.High, 0))
		} else {
			row = append(row, "", "", "")
		}
		if r := sp.PeakMemoryBytes; r.Refused == "" {
			row = append(row, mem(r.Value), mem(r.Low), mem(r.High))
		} else {
			row = append(row, "", "", "")
		}
		refused := strings.TrimSpace(strings.Join([]string{sp.Seconds.Refused, sp.PeakMemoryBytes.Refused}, " "))
		trust, trend := "", ""
		if pt := predictionPoint(sp); !math.IsNaN(pt.Quality) {
			trust = fmtF(pt.Quality, 4)
		}
		if sp.TrustTrend != nil {
			trend = fmtF(*sp.TrustTrend, 5)
		}
		row = append(row, refused, trust, trend, fmtF(sp.LadderSeconds, 1))
		if err := cw.Write(row); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

func fmtF(v float64, prec int) string { return strconv.FormatFloat(v, 'f', prec, 64) }

func intList(ns []int) string {
	var parts []string
	for _, n := range ns {
		parts = append(parts, thousands(n))
	}
	return strings.Join(parts, ", ")
}

// Thousands writes n with commas between groups of three digits, as the
// reports do.
func Thousands(n int) string { return thousands(n) }

func thousands(n int) string {
	s := strconv.Itoa(n)
	var b strings.Builder
	for i, c := range s {
		if i > 0 && (len(s)-i)%3 == 0 && c != '-' {
			b.WriteByte(',')
		}
		b.WriteRune(c)
	}
	return b.String()
}

// Duration writes seconds as the reports do: "42 s", "13 min 40 s",
// "2 h 05 min".
func Duration(secs float64) string {
	switch {
	case math.IsNaN(secs):
		return ""
	case secs < 90:
		return fmt.Sprintf("%.0f s", secs)
	case secs < 3*3600:
		m := int(math.Round(secs))
		return fmt.Sprintf("%d min %02d s", m/60, m%60)
	}
	m := int(math.Round(secs / 60))
	return fmt.Sprintf("%d h %02d min", m/60, m%60)
}

// Bytes writes a memory size in MiB or GiB.
func Bytes(b float64) string {
	if b >= 1<<30 {
		return fmt.Sprintf("%.2f GiB", b/(1<<30))
	}
	return fmt.Sprintf("%.0f MiB", b/(1<<20))
}
