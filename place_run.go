package nightjar

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"time"

	"nightjar/checkpoint"
	"nightjar/gradient"
	"nightjar/knn"
)

// placeState is placement.json: a placement's settings and progress.
type placeState struct {
	Tool        string                 `json:"tool"` // "nightjar place"
	Version     string                 `json:"version"`
	Settings    PlaceSettings          `json:"settings"`
	ReferenceID string                 `json:"reference_run_id,omitempty"`
	Input       checkpoint.Fingerprint `json:"input"`
	TableRows   int                    `json:"table_rows"` // rows of the new table, 0 before it was read
	// IDColumn and LabelColumn are the new table's id and label columns
	// (the settings', or the reference's when the new table has them).
	IDColumn    string    `json:"id_column,omitempty"`
	LabelColumn string    `json:"label_column,omitempty"`
	First       int       `json:"first_row"` // this placement's rows: [First, End)
	End         int       `json:"end_row"`
	Status      string    `json:"status"`
	Started     time.Time `json:"started"`
	Updated     time.Time `json:"updated"`
	Elapsed     float64   `json:"elapsed_seconds"`
}

const placeTool = "nightjar place"

func readPlaceState(dir string) (*placeState, error) {
	b, err := os.ReadFile(filepath.Join(dir, FileStateDir))
	if err != nil {
		return nil, err
	}
	var st placeState
	if err := json.Unmarshal(b, &st); err != nil || st.Tool != placeTool {
		return nil, &RunDirError{Dir: dir, Msg: FileStateDir + " is not a placement record (damaged, or written by another program)"}
	}
	return &st, nil
}

func writePlaceState(dir string, st *placeState) error {
	return writeJSONFile(filepath.Join(dir, FileStateDir), st)
}

// IsPlacement tells whether dir holds a placement (or a shard of one) made
// by Place: its placement.json.
func IsPlacement(dir string) bool {
	st, err := readPlaceState(dir)
	return err == nil && st != nil
}

// Place places the rows of src into the map of the finished run in refDir,
// the reference held fixed, and writes the result into outDir:
// placed.parquet (id, label, map position, the label voted by the
// reference neighbours and its share, the distance to the nearest reference
// row), map.png and report.json. With s.Shards > 1 it places only shard
// s.Shard's rows and writes outDir/parts/part-IIIII-of-NNNNN.parquet and the
// shard's report under outDir/shards; MergePlacement then writes the whole.
//
// Each new row gets its k = min(N−1, ⌊3·perplexity⌋) nearest reference rows
// (the reference's perplexity and metric, its --reduce projection), the
// conditional probabilities P_{j|i} over them calibrated to the perplexity
// (van der Maaten & Hinton 2008), a start at the median of their map
// positions (Kobak & Berens, Nat. Commun. 10:5416, 2019), and s.Steps
// gradient steps on its own KL term against the fixed reference map
// (Poličar, Stražar & Zupan, Machine Learning 2023; see gradient.Place). A
// row's result depends only on itself and the reference: the same bits in
// any shard, batch or number of threads.
//
// The reference is only read. Rows are placed in chunks, each saved when
// done: a placement stopped by ctx or killed continues where it stopped
// when Place is called again with the same arguments (or ResumePlace on
// its directory), and ends with the same bits. A directory holding a
// placement with other settings is refused. Errors the caller can fix
// satisfy IsUserFault.
func Place(ctx context.Context, refDir string, src Source, outDir string, s PlaceSettings, rt Runtime, obs Observer) (*PlaceResult, error) {
	obs = observerOrQuiet(obs)
	if err := checkRuntime(&rt); err != nil {
		return nil, err
	}
	if err := s.Validate(); err != nil {
		return nil, err
	}
	abs, err := filepath.Abs(refDir)
	if err != nil {
		return nil, err
	}
	s.Reference = abs
	if err := src.check(); err != nil {
		return nil, err
	}
	if src.path != "" {
		if s.Input, err = filepath.Abs(src.path); err != nil {
			return nil, err
		}
	}
	stateDir, _ := placeDirs(outDir, s)
	if err := os.MkdirAll(stateDir, 0o755); err != nil {
		return nil, &RunDirError{Dir: stateDir, Msg: errorText(err)}
	}
	lock, err := checkpoint.AcquireLock(stateDir)
	if err != nil {
		return nil, err
	}
	defer lock.Release()
	st, err := readPlaceState(stateDir)
	switch {
	case err == nil:
		if src.path == "" {
			s.Input = st.Settings.Input // the in-memory table saved there
		}
		if why := st.Settings.differs(s); why != "" {
			return nil, &RunDirError{Dir: stateDir, Msg: "holds a placement with other settings (" + why + "); choose another --out, or remove it"}
		}
		return runPlacement(ctx, outDir, stateDir, st, rt, true, obs)
	case !errors.Is(err, fs.ErrNotExist):
		return nil, err
	}
	path, _, _, err := src.resolve(stateDir, obs)
	if err != nil {
		return nil, err
	}
	s.Input = path
	now := time.Now().UTC()
	st = &placeState{Tool: placeTool, Version: Version, Settings: s, Status: StatusRunning, Started: now, Updated: now}
	if err := writePlaceState(stateDir, st); err != nil {
		return nil, err
	}
	return runPlacement(ctx, outDir, stateDir, st, rt, false, obs)
}

// ResumePlace continues the placement (or shard) whose directory is dir,
// with the settings it began with. On a finished placement it returns its
// report with AlreadyFinished set.
func ResumePlace(ctx context.Context, dir string, rt Runtime, obs Observer) (*PlaceResult, error) {
	obs = observerOrQuiet(obs)
	if err := checkRuntime(&rt); err != nil {
		return nil, err
	}
	lock, err := checkpoint.AcquireLock(dir)
	if err != nil {
		return nil, err
	}
	defer lock.Release()
	st, err := readPlaceState(dir)
	if err != nil {
		return nil, &RunDirError{Dir: dir, Msg: "not a placement directory: " + errorText(err)}
	}
	out := dir
	if st.Settings.Shards > 1 {
		out = filepath.Dir(filepath.Dir(dir))
	}
	return runPlacement(ctx, out, dir, st, rt, true, obs)
}

// checkRuntime checks the runtime options a placement uses.
func checkRuntime(rt *Runtime) error {
	if rt.Threads < 1 {
		return &SettingError{Name: "threads", Msg: fmt.Sprintf("must be at least 1, got %d", rt.Threads)}
	}
	if rt.ScoreSample < 0 {
		return &SettingError{Name: "score-sample", Msg: fmt.Sprintf("must be 0 or more, got %d", rt.ScoreSample)}
	}
	return nil
}

// placeJob is one invocation of a placement.
type placeJob struct {
	ctx      context.Context
	obs      Observer
	rt       Runtime
	st       *placeState
	s        PlaceSettings
	dir      string // state directory
	out      string // output directory
	start    time.Time
	elapsed0 float64

	ref    *reference
	rows   *refRows
	index  *refIndex // nil: exact search
	field  *gradient.Field
	x      Matrix  // this placement's new rows, under the metric
	id     *Column // and their id and label columns (nil when absent)
	label  *Column
	k      int
	recall map[int32]bool // rows of x sampled for the recall check
	rep    PlaceReport
}

func runPlacement(ctx context.Context, out, dir string, st *placeState, rt Runtime, resumed bool, obs Observer) (res *PlaceResult, err error) {
	j := &placeJob{ctx: ctx, obs: obs, rt: rt, st: st, s: st.Settings, dir: dir, out: out, start: time.Now(), elapsed0: st.Elapsed}
	_, table := placeDirs(out, j.s)
	if st.Status == StatusFinished {
		res := &PlaceResult{Dir: dir, Placed: table, AlreadyFinished: true}
		res.Report, _ = ReadPlaceReport(filepath.Join(dir, FileReport))
		if j.s.Shards == 1 {
			res.MapImage, res.MapPage = filepath.Join(dir, FileMap), filepath.Join(dir, FileMapPage)
		}
		return res, nil
	}
	defer func() {
		if err != nil {
			obs.Done()
			var stop *StoppedError
			status := StatusFailed
			if errors.As(err, &stop) {
				status = StatusInterrupted
			}
			j.setStatus(status)
		}
	}()
	j.setStatus(StatusRunning)
	if resumed {
		obs.Note(fmt.Sprintf("resuming the placement in %s", dir))
	}
	if err := j.prepare(resumed); err != nil {
		return nil, err
	}
	results, err := j.placeAll()
	if err != nil {
		return nil, err
	}
	return j.finish(results, table)
}

func (j *placeJob) setStatus(status string) {
	j.st.Status = status
	j.st.Updated = time.Now().UTC()
	j.st.Elapsed = j.elapsed0 + time.Since(j.start).Seconds()
	if err := writePlaceState(j.dir, j.st); err != nil {
		j.obs.Warn(err.Error())
	}
}

// prepare loads the reference, reads the new rows of this placement and
// sets up the neighbour search and the reference's repulsion.
func (j *placeJob) prepare(resumed bool) error {
	t0 := time.Now()
	ref, err := loadReference(j.s.Reference, j.rt.Threads, j.obs)
	if err != nil {
		return err
	}
	j.ref, j.k = ref, ref.k()
	if j.st.ReferenceID != "" && j.st.ReferenceID != ref.run.Manifest().RunID {
		return &RunDirError{Dir: j.dir, Msg: "the reference " + j.s.Reference + " is another run than the one this placement began with"}
	}
	j.st.ReferenceID = ref.run.Manifest().RunID
	j.rep = newPlaceReport(j.s, ref, j.rt.Threads)
	j.rep.Resumed = resumed
	j.rep.Phases["reference"] = time.Since(t0).Seconds()

	t1 := time.Now()
	bar := phaseBar(j.obs, "reading new rows", -1)
	sr, err := readShard(&j.s, ref, j.rt.Threads, bar)
	j.obs.Done()
	if err != nil {
		return err
	}
	t, fp := sr.t, sr.fp
	if rec := j.st.Input; rec.ValuesHash != "" {
		if same, why := rec.Same(fp); !same {
			return &RunDirError{Dir: j.dir, Msg: fmt.Sprintf("the new table %s changed since the placement began (%s); place it into another directory", j.s.Input, why)}
		}
	}
	n, first, end := sr.n, sr.first, sr.first+t.N
	j.st.Input, j.st.TableRows, j.st.First, j.st.End = fp, n, first, end
	j.st.IDColumn, j.st.LabelColumn = j.s.ID, j.s.Label
	j.setStatus(StatusRunning)
	j.rep.Input, j.rep.Format, j.rep.TableRows, j.rep.Skipped, j.rep.Rows = j.s.Input, t.Format, n, t.Skipped, end-first
	j.rep.Parameters = j.s
	if j.x, err = knn.MetricRows(t.Matrix, ref.metric()); err != nil {
		return fmt.Errorf("%s: %w (cosine distance needs a non-zero row)", j.s.Input, err)
	}
	j.id, j.label = t.ID, t.Label
	j.obs.Note(fmt.Sprintf("read %d new rows × %d features from %s; placing rows %d–%d into %s (%d rows)",
		n, t.D, j.s.Input, first+1, end, j.s.Reference, ref.feat.X.N))
	j.rep.Phases["read"] = time.Since(t1).Seconds()
	return j.setupSearch()
}

// sliceColumn returns rows [lo, hi) of c (nil for nil).
func sliceColumn(c *Column, lo, hi int) *Column {
	if c == nil {
		return nil
	}
	out := &Column{Name: c.Name}
	if c.Ints != nil {
		out.Ints = append([]int64(nil), c.Ints[lo:hi]...)
	} else {
		out.Strings = append([]string(nil), c.Strings[lo:hi]...)
	}
	return out
}

// setupSearch chooses the neighbour search, loads or builds the index, and
// builds the reference's repulsion.
func (j *placeJob) setupSearch() error {
	t0 := time.Now()
	ref := j.ref
	method := j.s.Neighbours
	if method == "auto" {
		method = "exact"
		if ref.feat.X.N > autoExactReference {
			method = "index"
		}
	}
	var err error
	exactTiles := method == "exact" || j.s.CheckRecall > 0
	if j.rows, err = newRefRows(ref.feat.X, ref.metric(), exactTiles); err != nil {
		return fmt.Errorf("the reference's features: %w", err)
	}
	if method == "index" {
		j.index, err = ref.loadIndex()
		switch {
		case errors.Is(err, fs.ErrNotExist) && j.s.Shards > 1:
			return &RunDirError{Dir: j.s.Reference, Msg: "has no neighbour index for placement; run 'nightjar place --prepare " + j.s.Reference + "' once before starting the shards"}
		case errors.Is(err, fs.ErrNotExist):
			j.obs.Note("the reference has no saved neighbour index: building it (save it for later placements with 'nightjar place --prepare " + j.s.Reference + "')")
			j.index, err = ref.buildIndex(j.rows, j.rt.Threads, j.obs)
		}
		if err != nil {
			return err
		}
	}
	j.rep.Neighbours.Method, j.rep.Neighbours.K = method, j.k
	if j.s.CheckRecall > 0 && j.index != nil {
		j.recall = map[int32]bool{}
		for _, r := range knn.SampleRows(j.st.TableRows, j.s.CheckRecall, j.s.Seed) {
			if int(r) >= j.st.First && int(r) < j.st.End {
				j.recall[r-int32(j.st.First)] = true
			}
		}
	}
	rep, _ := gradient.ParseMethod(j.s.Repulsion)
	j.field, err = gradient.NewField(ref.y, j.placeParams(rep))
	if err != nil {
		return err
	}
	j.rep.Optimiser.Repulsion, j.rep.Optimiser.Steps = j.field.Method().String(), j.s.Steps
	j.rep.Phases["setup"] = time.Since(t0).Seconds()
	return nil
}

func (j *placeJob) placeParams(m gradient.Method) gradient.PlaceParams {
	return placeParams(j.ref.s, j.s, m, j.rt.Threads)
}

// placeParams returns the optimiser's parameters of a placement with
// settings s into a reference made with settings ref.
func placeParams(ref Settings, s PlaceSettings, m gradient.Method, threads int) gradient.PlaceParams {
	return gradient.PlaceParams{Dims: ref.Dims, Dof: ref.Dof, Method: m, Theta: s.Theta,
		Steps: s.Steps, LearningRate: s.LearningRate, Momentum: s.Momentum,
		Exaggeration: s.Exaggeration, ExaggerationSteps: s.ExaggerationSteps, Gains: true, Threads: threads}
}
