package nightjar

import (
	"fmt"
	"os"
	"path/filepath"
	"time"

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
		if r < placeRecallWarn {
			j.obs.Warn(fmt.Sprintf("neighbour recall@%d = %.4f is below %.2f: the index misses neighbours of these new rows, as it does for rows far from every reference row (a population or batch the reference lacks); their placement and label votes are less sure. --neighbours exact finds them exactly, at a cost that grows with the reference's rows", j.k, r, placeRecallWarn))
		}
	}
	res := &PlaceResult{Dir: j.dir, Placed: tablePath, Report: &j.rep}
	var own []string
	if tab.label != nil {
		own = tab.label.Strings
	}
	j.rep.Scores = placeScores(j.ref, all.y, all.vote, all.share, own, j.rt.ScoreSample, j.s.Seed, j.rt.Threads)
	if j.s.Shards == 1 {
		res.MapImage, res.MapPage = filepath.Join(j.out, FileMap), filepath.Join(j.out, FileMapPage)
		if err := drawPlaced(j.out, j.ref, tab, j.s.Input, j.obs); err != nil {
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

// drawPlaced writes map.png and map.html of a placement into dir: the
// reference rows in a light neutral grey, the placed rows on top coloured
// by their own label, else by the label their reference neighbours voted.
func drawPlaced(dir string, ref *reference, t *placedTable, input string, obs Observer) error {
	return WriteMaps(dir, placedView(ref, t, input), obs)
}

// placedView is the MapView of a placement: the reference rows first, then
// the placed rows, each with its id (a reference without ids shows its row
// number), coloured as drawPlaced says.
func placedView(ref *reference, t *placedTable, input string) MapView {
	dims := ref.s.Dims
	nr, np := len(ref.y)/dims, t.n()
	v := MapView{Map: make([]float64, 0, len(ref.y)+len(t.y)), Dims: dims, Placed: make([]bool, nr+np), Seed: ref.s.Seed,
		Title:   fmt.Sprintf("nightjar: %s placed into the map of %s", filepath.Base(input), filepath.Base(ref.dir)),
		Caption: fmt.Sprintf("%s rows placed into %s reference rows (grey)", figure.Thousands(np), figure.Thousands(nr))}
	v.Map = append(append(v.Map, ref.y...), t.y...)
	for i := nr; i < nr+np; i++ {
		v.Placed[i] = true
	}
	v.IDs = joinIDs(ref.ids, t.id, nr)
	// The row numbers the page shows: a reference row's in the reference's
	// input (as its run recorded them), a placed row's in placed.parquet.
	v.Rows = make([]int64, 0, nr+np)
	if rows, known, err := loadRows(ref.run, nr); err == nil && known && rows != nil {
		v.Rows = append(v.Rows, rows...)
	} else {
		for i := range nr {
			v.Rows = append(v.Rows, int64(i))
		}
	}
	for i := range np {
		v.Rows = append(v.Rows, int64(i))
	}
	own, by := t.voted, colVoted
	if t.label != nil {
		own, by = t.label.Strings, t.label.Name
	}
	if own != nil {
		v.By, v.Labels = by, append(make([]string, nr, nr+np), own...)
	}
	return v
}

// joinIDs returns the ids of nr reference rows (a nil column: "row N" for
// the N-th) followed by the placed rows' ids, as integers when both are,
// else as text.
func joinIDs(ref, placed *Column, nr int) *Column {
	if ref != nil && ref.Ints != nil && placed.Ints != nil {
		return &Column{Name: placed.Name, Ints: append(append(make([]int64, 0, nr+placed.Len()), ref.Ints...), placed.Ints...)}
	}
	out := &Column{Name: placed.Name, Strings: make([]string, 0, nr+placed.Len())}
	for i := range nr {
		if ref != nil {
			out.Strings = append(out.Strings, ref.String(i))
		} else {
			out.Strings = append(out.Strings, fmt.Sprintf("row %d", i+1))
		}
	}
	for i := range placed.Len() {
		out.Strings = append(out.Strings, placed.String(i))
	}
	return out
}
