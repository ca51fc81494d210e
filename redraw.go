package nightjar

import (
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"

	"nightjar/checkpoint"
	"nightjar/internal/figure"
)

// RedrawOptions says how Redraw colours and draws a finished map.
type RedrawOptions struct {
	// By names the column that colours the points: a column of Table, or of
	// the run's input table when Table is "". "" colours by the run's label.
	By string
	// Table is a second table (Parquet, Arrow IPC, CSV or TSV) holding By,
	// joined to the map on the id: its column On holds the run's ids.
	Table, On string
	// As is "category", "number" or "" (auto: text and booleans are
	// categories, floating point numbers are numbers, integers are
	// categories when they take at most CategoryLimit distinct values).
	As string
	// PointSize, Opacity, Title: see MapView (0 and "" mean automatic).
	PointSize, Opacity float64
	Title              string
	// Out is the directory to write map.png and map.html into; "" is the
	// run directory itself, whose pictures are then replaced.
	Out string
}

// CategoryLimit is the most distinct values an integer column may take to be
// drawn as categories when RedrawOptions.As is automatic.
const CategoryLimit = 24

// RedrawResult says what Redraw drew.
type RedrawResult struct {
	Image, Page string // paths of map.png and map.html
	Rows        int    // rows of the map
	Matched     int    // rows that found a value of the column
	Numeric     bool   // coloured by number (else by category)
	Groups      int    // categories, when by category
	Scale       figure.Scale
	MatchedOn   string // "id", "input row" or "" (the run's own label)
}

// Redraw re-draws map.png and map.html of the finished run in dir, coloured
// by another column, without re-running anything. The column comes from the
// run's input table, matched to the map's rows by the run's id column or,
// without one, by the input row numbers the run recorded (so a run that
// dropped rows with --skip-invalid is matched correctly); or from a second
// table joined on the id. Rows without a value are drawn grey and counted.
// Writing into the run directory takes the run's writer lock.
//
// For a placement (dir holds placement.json), the reference stays grey and
// the placed rows are coloured: by a column of placed.parquet
// (voted_label, vote_share, nearest_distance, the new table's label), of
// the second table joined on the id, or of the placement's new table
// joined on the id.
func Redraw(ctx context.Context, dir string, opt RedrawOptions, obs Observer) (*RedrawResult, error) {
	obs = observerOrQuiet(obs)
	if err := opt.check(); err != nil {
		return nil, err
	}
	placement := IsPlacement(dir)
	if _, err := os.Stat(filepath.Join(dir, checkpoint.ManifestName)); err != nil && !placement {
		return nil, &RunDirError{Dir: dir, Msg: "is not a run directory or a placement (no " + checkpoint.ManifestName + " or " + FileStateDir + ")"}
	}
	out := opt.Out
	if out == "" || sameDir(out, dir) {
		out = dir
		lock, err := checkpoint.AcquireLock(dir)
		if err != nil {
			return nil, err
		}
		defer lock.Release()
	} else if err := os.MkdirAll(out, 0o755); err != nil {
		return nil, fmt.Errorf("creating %s: %w", out, err)
	}
	view := redrawRun
	if placement {
		view = redrawPlacement
	}
	v, res, err := view(ctx, dir, opt, obs)
	if err != nil {
		return nil, err
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	v.PointSize, v.Opacity = opt.PointSize, opt.Opacity
	if opt.Title != "" {
		v.Title = opt.Title
	}
	if err := WriteMaps(out, v, obs); err != nil {
		return nil, err
	}
	res.Image, res.Page = filepath.Join(out, FileMap), filepath.Join(out, FileMapPage)
	return res, nil
}

// redrawRun returns the view of the finished run in dir coloured as opt
// asks, titled by its input and colouring.
func redrawRun(ctx context.Context, dir string, opt RedrawOptions, obs Observer) (MapView, *RedrawResult, error) {
	run, err := checkpoint.Open(dir)
	if err != nil {
		return MapView{}, nil, &RunDirError{Dir: dir, Msg: errorText(err)}
	}
	if st := run.Manifest().Status; st != checkpoint.StatusFinished {
		return MapView{}, nil, &RunDirError{Dir: dir, Msg: "is not finished (status " + st + "); run 'nightjar resume " + dir + "' first"}
	}
	s, err := settingsOf(run)
	if err != nil {
		return MapView{}, nil, err
	}
	v, err := readFinishedMap(run, s)
	if err != nil {
		return MapView{}, nil, err
	}
	if err := ctx.Err(); err != nil {
		return MapView{}, nil, err
	}
	res := &RedrawResult{Rows: len(v.Map) / v.Dims}
	if err := colourBy(run, s, &v, opt, res, obs); err != nil {
		return MapView{}, nil, err
	}
	v.Title = mapTitle(s.Input, v.By)
	return v, res, nil
}

// check refuses options out of range.
func (o RedrawOptions) check() error {
	switch {
	case o.As != "" && o.As != "auto" && o.As != "category" && o.As != "number":
		return &SettingError{Name: "as", Msg: fmt.Sprintf("is %q; want category, number or auto", o.As)}
	case o.Table != "" && o.By == "":
		return &SettingError{Name: "by", Msg: "is needed with --table: name the column of the table that colours the map"}
	case !(o.PointSize >= 0 && o.PointSize <= 50):
		return &SettingError{Name: "point-size", Msg: fmt.Sprintf("is %g; want 0 (automatic) to 50 pixels", o.PointSize)}
	case !(o.Opacity >= 0 && o.Opacity <= 1):
		return &SettingError{Name: "opacity", Msg: fmt.Sprintf("is %g; want 0 (automatic) to 1", o.Opacity)}
	}
	return nil
}

// sameDir tells whether a and b name the same directory.
func sameDir(a, b string) bool {
	sa, err1 := os.Stat(a)
	sb, err2 := os.Stat(b)
	return err1 == nil && err2 == nil && os.SameFile(sa, sb)
}

// readFinishedMap reads the map of a finished run from its embedding.parquet:
// positions, the id column and the label (its default colouring), and the
// input row numbers it recorded.
func readFinishedMap(run *checkpoint.Run, s Settings) (MapView, error) {
	names := []string{"map_1", "map_2", "map_3"}[:s.Dims]
	if s.ID != "" {
		names = append(names, s.ID)
	}
	if s.Label != "" && s.Label != s.ID {
		names = append(names, s.Label)
	}
	cols, err := readSheet(run.Path(FileEmbedding), names)
	if err != nil {
		return MapView{}, err
	}
	n := cols[0].len()
	v := MapView{Dims: s.Dims, Map: make([]float64, n*s.Dims), Seed: s.Seed}
	for k := range s.Dims {
		for i := range n {
			v.Map[i*s.Dims+k] = cols[k].number(i)
		}
	}
	byName := map[string]*sheetColumn{}
	for _, c := range cols[s.Dims:] {
		byName[c.name] = c
	}
	if c := byName[s.ID]; c != nil {
		v.IDs = &Column{Name: s.ID}
		if c.kind == kindInt {
			v.IDs.Ints = c.ints
		} else {
			v.IDs.Strings = make([]string, n)
			for i := range n {
				v.IDs.Strings[i] = c.key(i)
			}
		}
	}
	if c := byName[s.Label]; c != nil {
		v.By, v.Labels = s.Label, make([]string, n)
		for i := range n {
			v.Labels[i] = c.key(i)
		}
	}
	rows, known, err := loadRows(run, n)
	if err != nil {
		return MapView{}, err
	}
	if known {
		v.Rows = rows
	}
	return v, nil
}

// colourBy replaces the colouring of v by the column opt asks for.
func colourBy(run *checkpoint.Run, s Settings, v *MapView, opt RedrawOptions, res *RedrawResult, obs Observer) error {
	n := len(v.Map) / v.Dims
	var values *sheetColumn
	at := make([]int, n) // row of the table holding each map row's value, −1 for none
	switch {
	case opt.By == "":
		if v.Labels == nil {
			obs.Note("the run has no label: the map is drawn in one colour (colour it with --by COLUMN)")
		}
		res.Matched, res.Groups = n, len(figure.Categories(v.By, v.Labels).Groups)
		if v.Labels == nil {
			res.Matched = 0
		}
		return nil
	case opt.Table != "":
		on := opt.On
		if on == "" {
			on = s.ID
		}
		if v.IDs == nil {
			return &SettingError{Name: "table", Msg: "needs the run's ids to join on, and the run has no id column (embed with --id)"}
		}
		if on == "" {
			return &SettingError{Name: "on", Msg: "is needed: name the column of " + opt.Table + " that holds the run's ids"}
		}
		cols, err := readSheet(opt.Table, []string{on, opt.By})
		if err != nil {
			return err
		}
		values = cols[1]
		joinOnID(v.IDs, cols[0], at, opt.Table, obs)
		res.MatchedOn = "id"
		v.Caption = fmt.Sprintf("colours from %s, joined on %s", filepath.Base(opt.Table), on)
	default:
		var err error
		if values, err = inputColumn(run, s, v, opt.By, at, obs); err != nil {
			return err
		}
		res.MatchedOn = "id"
		if v.IDs == nil {
			res.MatchedOn = "input row"
		}
	}
	return applyColour(v, values, at, opt, res, obs)
}

// inputColumn reads column by of the run's input table and matches its rows
// to the map's: on the id when the run has one, else on the input row.
func inputColumn(run *checkpoint.Run, s Settings, v *MapView, by string, at []int, obs Observer) (*sheetColumn, error) {
	names := []string{by}
	if v.IDs != nil && s.ID != by {
		names = append(names, s.ID)
	}
	cols, err := readSheet(s.Input, names)
	if err != nil {
		return nil, err
	}
	if v.IDs != nil {
		idCol := cols[len(cols)-1]
		joinOnID(v.IDs, idCol, at, s.Input, obs)
		return cols[0], nil
	}
	total := cols[0].len()
	if fp, err := checkpoint.FingerprintFile(s.Input); err == nil {
		if same, why := run.Manifest().Input.Same(fp); !same {
			return nil, &RunDirError{Dir: run.Dir, Msg: fmt.Sprintf("the input %s changed since the run (%s): its rows can no longer be matched to the map by number (a run with --id can be matched by id)", s.Input, why)}
		}
	}
	switch {
	case v.Rows != nil:
		for i, r := range v.Rows {
			at[i] = -1
			if r < int64(total) {
				at[i] = int(r)
			}
		}
	case total == len(at):
		for i := range at {
			at[i] = i
		}
	default:
		return nil, &RunDirError{Dir: run.Dir, Msg: fmt.Sprintf("the map has %d rows and %s %d, and the run did not record which input rows it kept: colour it with a second table joined on an id (--table, --on), or embed with --id",
			len(at), s.Input, total)}
	}
	return cols[0], nil
}

// joinOnID sets at[i] to the row of col holding map row i's id, or −1. A
// repeated id in the table takes its first row, with one warning.
func joinOnID(ids *Column, col *sheetColumn, at []int, table string, obs Observer) {
	first := make(map[string]int, col.len())
	dup := 0
	for r := range col.len() {
		if !col.valid[r] {
			continue
		}
		k := col.key(r)
		if _, seen := first[k]; seen {
			dup++
			continue
		}
		first[k] = r
	}
	if dup > 0 {
		obs.Warn(fmt.Sprintf("%s: %s rows repeat an id of column %q; each map row takes the first", table, figure.Thousands(dup), col.name))
	}
	for i := range at {
		r, ok := first[ids.String(i)]
		if !ok {
			r = -1
		}
		at[i] = r
	}
}

// applyColour colours v by values (row at[i] for map row i) as opt.As says.
func applyColour(v *MapView, values *sheetColumn, at []int, opt RedrawOptions, res *RedrawResult, obs Observer) error {
	n := len(at)
	v.By, v.Labels, v.Values = opt.By, nil, nil
	numeric := opt.As == "number" || (opt.As != "category" && numericColumn(values))
	res.Numeric = numeric
	if numeric {
		v.Values = make([]float64, n)
		bad := 0
		for i, r := range at {
			v.Values[i] = math.NaN()
			if r >= 0 {
				v.Values[i] = values.number(r)
				if math.IsNaN(v.Values[i]) && values.valid[r] {
					bad++
				}
			}
			if !math.IsNaN(v.Values[i]) && !math.IsInf(v.Values[i], 0) {
				res.Matched++
			}
		}
		if bad > 0 {
			obs.Warn(fmt.Sprintf("column %q: %s values are not numbers and are drawn as no value", opt.By, figure.Thousands(bad)))
		}
		res.Scale = figure.NewScale(v.Values)
	} else {
		v.Labels, v.NoValue = make([]string, n), make([]bool, n)
		distinct := map[string]bool{}
		for i, r := range at {
			if r < 0 || !values.valid[r] {
				v.NoValue[i] = true
				continue
			}
			v.Labels[i] = values.key(r)
			distinct[v.Labels[i]] = true
			res.Matched++
		}
		res.Groups = min(len(distinct), figure.MaxGroups)
		if len(distinct) > figure.MaxGroups {
			obs.Warn(fmt.Sprintf("column %q has %s distinct values: the rarest share one colour (colour by number with --as number if it is one)", opt.By, figure.Thousands(len(distinct))))
		}
	}
	if missing := n - res.Matched; missing > 0 {
		obs.Warn(fmt.Sprintf("%s of %s map rows have no value of %q: drawn grey", figure.Thousands(missing), figure.Thousands(n), opt.By))
	}
	return nil
}

// numericColumn tells whether a column is drawn by number when the kind is
// automatic: floating point, or integers with more than CategoryLimit
// distinct values.
func numericColumn(c *sheetColumn) bool {
	switch c.kind {
	case kindFloat:
		return true
	case kindInt:
		seen := map[int64]bool{}
		for i, v := range c.ints {
			if c.valid[i] {
				seen[v] = true
				if len(seen) > CategoryLimit {
					return true
				}
			}
		}
	}
	return false
}
