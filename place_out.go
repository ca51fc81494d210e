package nightjar

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
	"time"

	"nightjar/checkpoint"
	"nightjar/internal/figure"
)

// finish writes the placement's table, report and (for a whole placement)
// map, marks it finished and removes its saved chunks.
func (j *placeJob) finish(all *placed, tablePath string) (*PlaceResult, error) {
	t0 := time.Now()
	if err := os.MkdirAll(filepath.Dir(tablePath), 0o755); err != nil {
		return nil, err
	}
	tab := j.table(all)
	if err := tab.write(tablePath); err != nil {
		return nil, err
	}
	n := all.n()
	var c0, c1 float64
	lowered := 0
	for i := range n {
		c0 += all.cost0[i]
		c1 += all.cost1[i]
		if all.cost1[i] < all.cost0[i] {
			lowered++
		}
	}
	if n > 0 {
		j.rep.Optimiser.CostStart, j.rep.Optimiser.CostEnd, j.rep.Optimiser.Lowered = c0/float64(n), c1/float64(n), float64(lowered)/float64(n)
	}
	if all.probes > 0 {
		r := float64(all.hits) / float64(all.probes*int64(j.k))
		j.rep.Neighbours.Recall, j.rep.Neighbours.RecallSample, j.rep.Neighbours.RecallHits = &r, int(all.probes), all.hits
		j.obs.Note(fmt.Sprintf("neighbour recall@%d = %.4f on %d sampled new rows", j.k, r, all.probes))
	}
	res := &PlaceResult{Dir: j.dir, Placed: tablePath, Report: &j.rep}
	var own []string
	if tab.label != nil {
		own = tab.label.Strings
	}
	j.rep.Scores = placeScores(j.ref, all.y, all.vote, all.share, own, j.rt.ScoreSample, j.s.Seed, j.rt.Threads)
	if j.s.Shards == 1 {
		res.MapImage = filepath.Join(j.out, FileMap)
		if err := drawPlaced(res.MapImage, j.ref, tab, j.obs); err != nil {
			return nil, err
		}
	}
	j.rep.Phases["outputs"] = time.Since(t0).Seconds()
	j.rep.SecondsTotal = j.elapsed0 + time.Since(j.start).Seconds()
	j.rep.PeakMemoryBytes = peakMemory()
	if err := writePlaceReport(filepath.Join(j.dir, FileReport), &j.rep); err != nil {
		return nil, err
	}
	j.setStatus(StatusFinished)
	if err := os.RemoveAll(filepath.Join(j.dir, dirChunks)); err != nil {
		j.obs.Warn(fmt.Sprintf("removing the saved chunks: %v", err))
	}
	j.obs.Note(fmt.Sprintf("placed %d rows into %s in %.1fs", n, j.s.Reference, j.rep.SecondsTotal))
	return res, nil
}

// table returns the placed table of the placement's rows.
func (j *placeJob) table(all *placed) *placedTable {
	n := all.n()
	t := &placedTable{dims: j.ref.s.Dims, id: j.id, label: j.label, y: all.y, nearest: all.nearest}
	if t.id == nil {
		t.id = &Column{Name: colRow, Ints: make([]int64, n)}
		for i := range n {
			t.id.Ints[i] = int64(j.st.First + i + 1)
		}
	}
	if t.label != nil && t.label.Strings == nil {
		t.label = &Column{Name: t.label.Name, Strings: labelStrings(t.label)}
	}
	if j.ref.classes != nil {
		t.voted, t.share = make([]string, n), all.share
		for i, v := range all.vote {
			t.voted[i] = j.ref.classes[v]
		}
	}
	return t
}

// drawPlaced draws map.png: the reference in grey, the placed rows on top
// coloured by their own label, else by their voted label.
func drawPlaced(path string, ref *reference, t *placedTable, obs Observer) error {
	labels, heading := t.voted, "voted label"
	if t.label != nil {
		labels, heading = t.label.Strings, t.label.Name
	}
	m, err := figure.PlacedMap(ref.y, t.y, ref.s.Dims, heading, labels)
	if err != nil {
		return err
	}
	opt := figure.MapOptions{Title: "nightjar: rows placed into a finished map",
		Caption: fmt.Sprintf("%d rows placed into %d reference rows (grey)", t.n(), len(ref.y)/ref.s.Dims)}
	var lacking []rune
	err = checkpoint.AtomicWrite(path, func(w io.Writer) error {
		var err error
		lacking, err = figure.DrawMap(w, m, opt)
		return err
	})
	if err != nil {
		return fmt.Errorf("drawing %s: %w", path, err)
	}
	if len(lacking) > 0 {
		obs.Warn(fmt.Sprintf("%s: the font lacks %q, drawn as boxes", path, string(lacking)))
	}
	return nil
}
