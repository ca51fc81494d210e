package nightjar

import (
	"context"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
)

// redrawPlacement returns the view of the finished placement (or merge of
// shards) in dir, for Redraw: the reference stays grey and only the placed
// rows are coloured, by a column of placed.parquet (voted_label,
// vote_share, nearest_distance, the new table's label), else of a second
// table joined on the id (opt.Table), else of the placement's new table
// joined on the id.
func redrawPlacement(ctx context.Context, dir string, opt RedrawOptions, obs Observer) (MapView, *RedrawResult, error) {
	st, err := readPlaceState(dir)
	if err != nil {
		return MapView{}, nil, &RunDirError{Dir: dir, Msg: "not a placement directory: " + errorText(err)}
	}
	table := filepath.Join(dir, FilePlaced)
	if _, err := os.Stat(table); st.Status != StatusFinished || err != nil {
		return MapView{}, nil, &RunDirError{Dir: dir, Msg: "holds no finished placement (status " + st.Status + "); run the placement again to finish it, or 'nightjar merge' its shards"}
	}
	// Reading the reference's map takes two goroutines, as the CLI's
	// default; the result does not depend on it.
	ref, err := loadReferenceMap(st.Settings.Reference, 2)
	if err != nil {
		return MapView{}, nil, err
	}
	id := st.IDColumn
	if id == "" {
		id = colRow
	}
	t, err := readPlacedTable(table, id, st.LabelColumn, ref.s.Dims, ref.classes != nil)
	if err != nil {
		return MapView{}, nil, &RunDirError{Dir: dir, Msg: "its " + FilePlaced + " is unreadable: " + errorText(err)}
	}
	if err := ctx.Err(); err != nil {
		return MapView{}, nil, err
	}
	v := placedView(ref, t, st.Settings.Input)
	res := &RedrawResult{Rows: t.n()}
	if opt.By == "" {
		res.Groups = len(v.colouring().Groups)
		if v.Labels != nil {
			res.Matched = t.n()
		}
	} else if err := colourPlaced(&v, t, table, st, opt, res, obs); err != nil {
		return MapView{}, nil, err
	}
	return v, res, nil
}

// colourPlaced colours the placed rows of v (the rows after the reference's)
// by the column opt.By, found as redrawPlacement says.
func colourPlaced(v *MapView, t *placedTable, table string, st *placeState, opt RedrawOptions, res *RedrawResult, obs Observer) error {
	np := t.n()
	at := make([]int, np)
	var values *sheetColumn
	switch {
	case opt.Table != "":
		on := opt.On
		if on == "" {
			on = st.IDColumn
		}
		if on == "" {
			return &SettingError{Name: "on", Msg: "is needed: name the column of " + opt.Table + " that holds the placed rows' ids"}
		}
		cols, err := readSheet(opt.Table, []string{on, opt.By})
		if err != nil {
			return err
		}
		values = cols[1]
		joinOnID(t.id, cols[0], at, opt.Table, obs)
		v.Caption = fmt.Sprintf("colours from %s, joined on %s", filepath.Base(opt.Table), on)
	default:
		cols, err := readSheet(table, []string{opt.By})
		var in *InputError
		switch {
		case err == nil:
			values = cols[0]
			for i := range at {
				at[i] = i
			}
		case errors.As(err, &in) && in.Column == opt.By && st.IDColumn != "":
			// Not a column of placed.parquet: the new table's, by id.
			var again *InputError
			if cols, err = readSheet(st.Settings.Input, []string{opt.By, st.IDColumn}); errors.As(err, &again) && again.Column == opt.By {
				return &InputError{File: table, Column: opt.By, Reason: "no such column here (" + strings.TrimPrefix(in.Reason, "no such column (") + ", nor in the new table " + st.Settings.Input}
			} else if err != nil {
				return err
			}
			values = cols[0]
			joinOnID(t.id, cols[1], at, st.Settings.Input, obs)
		default:
			return err
		}
	}
	res.MatchedOn = "id"
	own := MapView{Map: t.y, Dims: v.Dims}
	if err := applyColour(&own, values, at, opt, res, obs); err != nil {
		return err
	}
	nr := len(v.Map)/v.Dims - np
	v.By, v.Labels, v.Values, v.NoValue = own.By, nil, nil, nil
	if own.Values != nil {
		v.Values = make([]float64, nr, nr+np)
		for i := range v.Values {
			v.Values[i] = math.NaN()
		}
		v.Values = append(v.Values, own.Values...)
	} else {
		v.Labels = append(make([]string, nr, nr+np), own.Labels...)
		v.NoValue = append(make([]bool, nr, nr+np), own.NoValue...)
	}
	return nil
}
