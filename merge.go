package nightjar

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"time"

	"nightjar/checkpoint"
)

// partPattern matches the file names of parts (PartName).
var partPattern = regexp.MustCompile(`^part-(\d{5})-of-(\d{5})\.parquet$`)

// shardPart is one finished shard found by MergePlacement.
type shardPart struct {
	index int
	path  string // its part
	st    *placeState
	rep   *PlaceReport
}

// MergePlacement merges the parts of a sharded placement in outDir (each
// written by Place with the same settings and Shards, a different Shard)
// into outDir/placed.parquet, map.png, map.html and report.json. It checks that every
// part is there exactly once (outDir/parts holds part-IIIII-of-NNNNN.parquet
// for each I in 0…N−1 and no other table), that every shard finished with
// the same settings, reference and input, and that the parts' row ranges
// join up to the whole table. placed.parquet is then the same bytes as a
// placement of the whole table in one go. Hidden files in the parts
// directory (names starting with "." or "_") are passed over.
func MergePlacement(ctx context.Context, outDir string, rt Runtime, obs Observer) (*PlaceResult, error) {
	obs = observerOrQuiet(obs)
	if err := checkRuntime(&rt); err != nil {
		return nil, err
	}
	t0 := time.Now()
	lock, err := checkpoint.AcquireLock(outDir)
	if err != nil {
		return nil, err
	}
	defer lock.Release()
	parts, err := findParts(outDir)
	if err != nil {
		return nil, err
	}
	first := parts[0].st
	ref, err := loadReferenceMap(first.Settings.Reference, rt.Threads)
	if err != nil {
		return nil, err
	}
	if ref.run.Manifest().RunID != first.ReferenceID {
		return nil, &RunDirError{Dir: outDir, Msg: "the reference " + first.Settings.Reference + " is another run than the one the shards placed rows into"}
	}
	merged := &placedTable{dims: ref.s.Dims}
	votes := ref.classes != nil
	for _, p := range parts {
		if err := ctx.Err(); err != nil {
			return nil, &StoppedError{Dir: outDir, Phase: "merge", Err: context.Cause(ctx)}
		}
		id := p.st.IDColumn
		if id == "" {
			id = colRow
		}
		t, err := readPlacedTable(p.path, id, p.st.LabelColumn, ref.s.Dims, votes)
		if err != nil {
			return nil, &RunDirError{Dir: outDir, Msg: "part " + filepath.Base(p.path) + " is unreadable: " + errorText(err)}
		}
		if t.n() != p.st.End-p.st.First {
			return nil, &RunDirError{Dir: outDir, Msg: fmt.Sprintf("part %s has %d rows, its shard placed %d", filepath.Base(p.path), t.n(), p.st.End-p.st.First)}
		}
		merged.append(t)
	}
	rep := mergeReports(parts, merged.n())
	classOf := map[string]int32{}
	for i, c := range ref.classes {
		classOf[c] = int32(i)
	}
	var vote []int32
	for _, v := range merged.voted {
		vote = append(vote, classOf[v])
	}
	var own []string
	if merged.label != nil {
		own = merged.label.Strings
	}
	rep.Scores = placeScores(ref, merged.y, vote, merged.share, own, rt.ScoreSample, first.Settings.Seed, rt.Threads)
	res := &PlaceResult{Dir: outDir, Placed: filepath.Join(outDir, FilePlaced), MapImage: filepath.Join(outDir, FileMap), MapPage: filepath.Join(outDir, FileMapPage), Report: rep}
	if err := merged.write(res.Placed); err != nil {
		return nil, err
	}
	if err := drawPlaced(outDir, ref, merged, first.Settings.Input, obs); err != nil {
		return nil, err
	}
	rep.Phases["merge"] = time.Since(t0).Seconds()
	rep.SecondsTotal += time.Since(t0).Seconds()
	rep.PeakMemoryBytes = max(rep.PeakMemoryBytes, peakMemory())
	if err := writePlaceReport(filepath.Join(outDir, FileReport), rep); err != nil {
		return nil, err
	}
	st := *first
	st.Settings.Shard, st.First, st.End, st.Status = 0, 0, first.TableRows, StatusFinished
	st.Updated = time.Now().UTC()
	if err := writePlaceState(outDir, &st); err != nil {
		return nil, err
	}
	obs.Note(fmt.Sprintf("merged %d parts, %d rows, into %s", len(parts), merged.n(), res.Placed))
	return res, nil
}

// append adds the rows of t.
func (m *placedTable) append(t *placedTable) {
	if m.id == nil {
		m.id = &Column{Name: t.id.Name}
		if t.label != nil {
			m.label = &Column{Name: t.label.Name}
		}
	}
	m.id.Ints = append(m.id.Ints, t.id.Ints...)
	m.id.Strings = append(m.id.Strings, t.id.Strings...)
	if t.label != nil {
		m.label.Strings = append(m.label.Strings, t.label.Strings...)
	}
	m.y = append(m.y, t.y...)
	if t.voted != nil {
		m.voted = append(m.voted, t.voted...)
		m.share = append(m.share, t.share...)
	}
	m.nearest = append(m.nearest, t.nearest...)
}

// findParts lists the parts of outDir/parts and their shards, and checks
// that they are complete and consistent.
func findParts(outDir string) ([]shardPart, error) {
	dir := filepath.Join(outDir, dirParts)
	bad := func(format string, args ...any) error {
		return &RunDirError{Dir: outDir, Msg: fmt.Sprintf(format, args...)}
	}
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil, bad("no parts to merge (%s)", errorText(err))
	}
	shards := -1
	found := map[int]string{}
	for _, e := range entries {
		name := e.Name()
		if strings.HasPrefix(name, ".") || strings.HasPrefix(name, "_") {
			continue
		}
		m := partPattern.FindStringSubmatch(name)
		if m == nil {
			return nil, bad("%s in %s is not a part (part-IIIII-of-NNNNN.parquet): remove it, so that the parts directory reads as one dataset", name, dir)
		}
		i, _ := strconv.Atoi(m[1])
		n, _ := strconv.Atoi(m[2])
		if shards >= 0 && n != shards {
			return nil, bad("%s holds parts of %d and of %d shards: remove the parts of the other sharding", dir, shards, n)
		}
		shards = n
		if i >= n {
			return nil, bad("%s: shard %d of %d does not exist", name, i, n)
		}
		found[i] = filepath.Join(dir, name)
	}
	if shards < 0 {
		return nil, bad("%s holds no parts", dir)
	}
	var missing []string
	for i := range shards {
		if _, ok := found[i]; !ok {
			missing = append(missing, strconv.Itoa(i))
		}
	}
	if len(missing) > 0 {
		return nil, bad("the parts of shard(s) %s of %d are missing from %s: run those shards (or wait for them) before merging", strings.Join(missing, ", "), shards, dir)
	}
	parts := make([]shardPart, shards)
	for i := range shards {
		sdir := filepath.Join(outDir, dirShards, shardName(i, shards))
		st, err := readPlaceState(sdir)
		if err != nil {
			return nil, bad("shard %d of %d has no record in %s (%s)", i, shards, sdir, errorText(err))
		}
		if st.Status != StatusFinished {
			return nil, bad("shard %d of %d is not finished (status %s); resume it with 'nightjar resume %s'", i, shards, st.Status, sdir)
		}
		rep, err := ReadPlaceReport(filepath.Join(sdir, FileReport))
		if err != nil {
			return nil, bad("shard %d of %d has no report: %s", i, shards, errorText(err))
		}
		parts[i] = shardPart{index: i, path: found[i], st: st, rep: rep}
	}
	return parts, checkShards(outDir, parts)
}

// checkShards checks that the shards are one placement cut in ranges that
// join up.
func checkShards(outDir string, parts []shardPart) error {
	first := parts[0].st
	end := 0
	for _, p := range parts {
		st := p.st
		want := first.Settings
		want.Shard = p.index
		if why := want.differs(st.Settings); why != "" {
			return &RunDirError{Dir: outDir, Msg: fmt.Sprintf("shard %d was placed with other settings than shard 0 (%s)", p.index, why)}
		}
		if st.Input.ValuesHash != first.Input.ValuesHash || st.ReferenceID != first.ReferenceID || st.TableRows != first.TableRows ||
			st.IDColumn != first.IDColumn || st.LabelColumn != first.LabelColumn {
			return &RunDirError{Dir: outDir, Msg: fmt.Sprintf("shard %d placed another table or into another reference than shard 0", p.index)}
		}
		if st.First != end {
			return &RunDirError{Dir: outDir, Msg: fmt.Sprintf("shard %d starts at row %d, the shards before it end at row %d", p.index, st.First+1, end)}
		}
		end = st.End
	}
	if end != first.TableRows {
		return &RunDirError{Dir: outDir, Msg: fmt.Sprintf("the shards end at row %d of %d", end, first.TableRows)}
	}
	return nil
}

// mergeReports combines the shards' reports: sums of rows, times and recall
// counts, row-weighted means of the costs, the largest peak memory.
func mergeReports(parts []shardPart, rows int) *PlaceReport {
	rep := *parts[0].rep
	rep.Shard, rep.Rows, rep.Scores = nil, rows, nil
	rep.Phases = map[string]float64{}
	rep.SecondsTotal, rep.PeakMemoryBytes = 0, 0
	rep.Neighbours.Seconds, rep.Optimiser.Seconds = 0, 0
	rep.Neighbours.Recall, rep.Neighbours.RecallSample, rep.Neighbours.RecallHits = nil, 0, 0
	var c0, c1, low float64
	for _, p := range parts {
		r := p.rep
		w := float64(r.Rows) / float64(max(rows, 1))
		c0 += w * r.Optimiser.CostStart
		c1 += w * r.Optimiser.CostEnd
		low += w * r.Optimiser.Lowered
		rep.Neighbours.Seconds += r.Neighbours.Seconds
		rep.Optimiser.Seconds += r.Optimiser.Seconds
		rep.Neighbours.RecallSample += r.Neighbours.RecallSample
		rep.Neighbours.RecallHits += r.Neighbours.RecallHits
		rep.SecondsTotal += r.SecondsTotal
		rep.PeakMemoryBytes = max(rep.PeakMemoryBytes, r.PeakMemoryBytes)
		rep.Resumed = rep.Resumed || r.Resumed
		for k, v := range r.Phases {
			rep.Phases[k] += v
		}
	}
	rep.Optimiser.CostStart, rep.Optimiser.CostEnd, rep.Optimiser.Lowered = c0, c1, low
	if n := rep.Neighbours.RecallSample; n > 0 {
		r := float64(rep.Neighbours.RecallHits) / float64(int64(n)*int64(rep.Neighbours.K))
		rep.Neighbours.Recall = &r
	}
	return &rep
}
