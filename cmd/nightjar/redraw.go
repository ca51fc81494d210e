package main

import (
	"context"
	"fmt"
	"io"

	"nightjar"
)

// runRecolour re-draws map.png and map.html of a finished run, coloured by
// another column, without re-running it.
func runRecolour(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("recolour", "re-draw map.png and map.html of a finished run or placement coloured by any column, without re-running it",
		"nightjar recolour runs/cells --by donor --table cells_meta.csv --on barcode", stderr)
	var opt nightjar.RedrawOptions
	fs.StringVar(&opt.By, "by", "", "column that colours the points (default: the run's label)")
	fs.StringVar(&opt.Table, "table", "", "a second table (Parquet, Arrow IPC, CSV, TSV) holding --by, joined on the run's ids (default: the run's input)")
	fs.StringVar(&opt.On, "on", "", "the column of --table holding the run's ids (default: the run's --id name)")
	fs.StringVar(&opt.As, "as", "auto", "category, number, or auto (text is a category, decimals are numbers, integers are categories up to 24 distinct values)")
	fs.Float64Var(&opt.PointSize, "point-size", 0, "point diameter in pixels (0: by the number of rows)")
	fs.Float64Var(&opt.Opacity, "opacity", 0, "opacity of each point, 0 to 1 (0: by density)")
	fs.StringVar(&opt.Title, "title", "", "title of both pictures (default: the input's name and the column)")
	fs.StringVar(&opt.Out, "out", "", "directory for map.png and map.html (default: replace those of the run)")
	quiet := fs.Bool("quiet", false, "no notes on stderr (warnings still show)")
	pos, err := parseFlags(fs, args, 1)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usagef("recolour: name the run or placement directory (nightjar recolour DIR --by COLUMN)")
	}
	res, err := nightjar.Redraw(ctx, pos[0], opt, newUI(stderr, *quiet))
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "map:  %s\npage: %s\n", res.Image, res.Page)
	switch {
	case opt.By == "":
		fmt.Fprintln(stdout, "coloured by the run's label")
	case res.Numeric:
		fmt.Fprintf(stdout, "coloured by %s as numbers, %s to %s (%s); %d of %d rows have a value (matched on %s)\n",
			opt.By, fmtNum(res.Scale.Lo), fmtNum(res.Scale.Hi), res.Scale.Clip, res.Matched, res.Rows, res.MatchedOn)
	default:
		fmt.Fprintf(stdout, "coloured by %s in %d categories; %d of %d rows have a value (matched on %s)\n",
			opt.By, res.Groups, res.Matched, res.Rows, res.MatchedOn)
	}
	fmt.Fprintln(stdout, "Caution: in a t-SNE map, cluster sizes and distances between clusters carry little meaning.")
	return nil
}

// fmtNum formats a scale's end with four significant digits.
func fmtNum(v float64) string { return fmt.Sprintf("%.4g", v) }
