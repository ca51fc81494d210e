package nightjar

import (
	"fmt"
	"io"
	"math"
	"strings"

	"nightjar/bench"
)

// writePredictionMarkdown writes predict.md: the header, one line per
// setting, how the prediction was made, then each setting's phases.
func writePredictionMarkdown(w io.Writer, pf *PredictionFile, meta bench.Meta) error {
	var b strings.Builder
	fmt.Fprintf(&b, "Prediction for the whole table: %s, %s rows. From random subsamples of %s rows; %d run(s) of each setting at each size, %s, after %d untimed warm-up run(s). Machine: %d cores, %s, %d threads. Load average (1 min): %s at the start, %s at the end. Made on %s in %s.\n",
		meta.Dataset, thousands(pf.Rows), intList(pf.Ladder), meta.Repeats, meta.Order, meta.Warmup, pf.Cores, meta.GoVersion, pf.Threads,
		fmtLoad(meta.LoadStart), fmtLoad(meta.LoadEnd), meta.Date, Duration(pf.Seconds))
	if meta.Command != "" {
		fmt.Fprintf(&b, "Command: `%s`\n", meta.Command)
	}
	var rungs []string
	for _, n := range pf.Ladder {
		rungs = append(rungs, thousands(n))
	}
	head := []string{"setting", "wall time", "range", "peak memory", "range",
		fmt.Sprintf("trustworthiness@%d at %s rows", meta.K, strings.Join(rungs, " / ")), "per tenfold rows", "prediction took"}
	b.WriteString("\n| " + strings.Join(head, " | ") + " |\n|" + strings.Repeat(" --- |", len(head)) + "\n")
	for _, sp := range pf.Settings {
		b.WriteString("| " + strings.Join(summaryRow(sp, pf.Ladder), " | ") + " |\n")
	}
	b.WriteString("\nEach phase's seconds follow the growth its method implies (a + b·N for reading, affinities, the recall check, scores and outputs, and for the grid optimiser, whose fixed part is the grid; a + b·N·ln N for NN-descent, HNSW and Barnes–Hut; a + b·N² for exact searches): the law is checked on every subsample (the scores only on those with at least the rows of their sample, where two sizes suffice) and extended from the two largest, NN-descent's passes are counted from the recalls it estimated, and the phases are summed. A range is about two standard deviations: the fits, the gap between the fit of all subsamples and of the two largest, and the noise of one run (wider for runs during which other programs used the cores). A prediction is refused where the measurements do not follow the law. Quality is measured on the subsamples, not predicted: the trend says how it moved with the rows.\n")
	for _, n := range meta.Notes {
		fmt.Fprintf(&b, "\n%s\n", n)
	}
	for _, sp := range pf.Settings {
		writePhaseTable(&b, sp, pf)
	}
	_, err := io.WriteString(w, b.String())
	return err
}

func fmtLoad(v float64) string {
	if math.IsNaN(v) {
		return "unknown"
	}
	return fmt.Sprintf("%.2f", v)
}

// summaryRow is a setting's line of the summary table.
func summaryRow(sp SettingPrediction, ladder []int) []string {
	row := []string{sp.Name}
	if r := sp.Seconds; r.Refused != "" {
		row = append(row, "refused: "+r.Refused, "")
	} else {
		row = append(row, Duration(r.Value), Duration(r.Low)+" – "+Duration(r.High))
	}
	if r := sp.PeakMemoryBytes; r.Refused != "" {
		row = append(row, "refused: "+r.Refused, "")
	} else {
		row = append(row, Bytes(r.Value), Bytes(r.Low)+" – "+Bytes(r.High))
	}
	var ts []string
	for _, n := range ladder {
		t := "–"
		for _, q := range sp.Quality {
			if q.Rows == n && q.Trustworthiness != nil {
				t = fmt.Sprintf("%.4f", *q.Trustworthiness)
			}
		}
		ts = append(ts, t)
	}
	trend := ""
	if sp.TrustTrend != nil {
		trend = fmt.Sprintf("%+.4f", *sp.TrustTrend)
	}
	took := Duration(sp.LadderSeconds)
	if sp.Seconds.Refused == "" && sp.Seconds.Value > 0 {
		took += fmt.Sprintf(" (%.0f %%)", 100*sp.LadderSeconds/sp.Seconds.Value)
	}
	return append(row, strings.Join(ts, " / "), trend, took)
}

// writePhaseTable writes a setting's phases: measured medians at each
// subsample size, the prediction, its range and the fit's χ²/dof.
func writePhaseTable(b *strings.Builder, sp SettingPrediction, pf *PredictionFile) {
	fmt.Fprintf(b, "\n### %s\n\nMethods for %s rows: neighbours %s, repulsion %s.", sp.Name, thousands(pf.Rows), sp.Neighbours, sp.Repulsion)
	for _, n := range sp.Notes {
		fmt.Fprintf(b, " %s.", strings.TrimSuffix(n, "."))
	}
	b.WriteString(" Seconds:\n\n")
	head := []string{"phase", "law"}
	for _, q := range sp.Quality {
		head = append(head, thousands(q.Rows)+" rows")
	}
	head = append(head, "predicted for "+thousands(pf.Rows), "range", "χ²/dof")
	b.WriteString("| " + strings.Join(head, " | ") + " |\n|" + strings.Repeat(" --- |", len(head)) + "\n")
	for _, p := range sp.Phases {
		row := []string{p.Name, p.Law}
		for _, q := range sp.Quality {
			row = append(row, fmt.Sprintf("%.2f", q.Phases[p.Name]))
		}
		if p.Seconds.Refused != "" {
			row = append(row, "refused: "+p.Seconds.Refused, "", "")
		} else {
			row = append(row, fmt.Sprintf("%.1f", p.Seconds.Value), fmt.Sprintf("%.1f–%.1f", p.Seconds.Low, p.Seconds.High), fmt.Sprintf("%.2f", p.Chi2))
		}
		b.WriteString("| " + strings.Join(row, " | ") + " |\n")
	}
	row := []string{"**wall time**", "sum"}
	mem := []string{"**peak memory**", "a + b·N"}
	for _, q := range sp.Quality {
		row = append(row, fmt.Sprintf("%.2f", q.Seconds))
		mem = append(mem, Bytes(float64(q.PeakMemoryBytes)))
	}
	if r := sp.Seconds; r.Refused == "" {
		row = append(row, fmt.Sprintf("%.0f", r.Value), fmt.Sprintf("%.0f–%.0f", r.Low, r.High), "")
	} else {
		row = append(row, "refused", "", "")
	}
	if r := sp.PeakMemoryBytes; r.Refused == "" {
		mem = append(mem, Bytes(r.Value), Bytes(r.Low)+" – "+Bytes(r.High), "")
	} else {
		mem = append(mem, "refused: "+r.Refused, "", "")
	}
	b.WriteString("| " + strings.Join(row, " | ") + " |\n| " + strings.Join(mem, " | ") + " |\n")
}
