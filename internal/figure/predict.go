package figure

import (
	"fmt"
	"io"
	"math"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// PredictionPoint is one setting on the chart of a prediction: its
// predicted wall time for the full table with the range, and its quality
// measured on subsamples.
type PredictionPoint struct {
	Name                 string
	Seconds, Low, High   float64 // predicted wall time and its range (x); NaN: refused, not drawn
	Quality              float64 // the score on the largest subsample (y); NaN: not drawn
	QualityLo, QualityHi float64 // the scores' range over the subsamples (NaN: none)
}

// predXY adapts the points to gonum/plot's error bars.
type predXY []PredictionPoint

func (p predXY) Len() int                    { return len(p) }
func (p predXY) XY(i int) (float64, float64) { return p[i].Seconds, p[i].Quality }
func (p predXY) XError(i int) (float64, float64) {
	return p[i].Seconds - p[i].Low, p[i].High - p[i].Seconds
}
func (p predXY) YError(i int) (float64, float64) {
	lo, hi := p[i].QualityLo, p[i].QualityHi
	if math.IsNaN(lo) || math.IsNaN(hi) {
		return 0, 0
	}
	return p[i].Quality - lo, hi - p[i].Quality
}

// DrawPrediction writes a PNG chart of quality against the predicted wall
// time of a run on the full table, one point per setting in the map's
// colours (Palette), with the predicted range as a horizontal bar and the
// quality's range over the subsamples as a vertical one, in the style of
// DrawTradeoff. Times are shown in seconds, minutes or hours, whichever
// suits the largest. Points without a prediction or a score are left out;
// with none left it returns an error.
func DrawPrediction(w io.Writer, title, quality string, pts []PredictionPoint) error {
	var ok predXY
	for _, pt := range pts {
		if !math.IsNaN(pt.Seconds) && !math.IsNaN(pt.Quality) {
			ok = append(ok, pt)
		}
	}
	if len(ok) == 0 {
		return fmt.Errorf("prediction chart: no setting has both a predicted time and a %s score", quality)
	}
	unit, div := "s", 1.0
	top := 0.0
	for _, pt := range ok {
		top = math.Max(top, pt.High)
	}
	switch {
	case top > 3*3600:
		unit, div = "h", 3600
	case top > 180:
		unit, div = "min", 60
	}
	scaled := make(predXY, len(ok))
	for i, pt := range ok {
		pt.Seconds, pt.Low, pt.High = pt.Seconds/div, pt.Low/div, pt.High/div
		scaled[i] = pt
	}
	p := plot.New()
	styleChart(p)
	p.Title.Text = title
	p.X.Label.Text = "predicted wall time for the full table (" + unit + ")"
	p.Y.Label.Text = quality
	grid := plotter.NewGrid()
	grid.Vertical.Color, grid.Horizontal.Color = Frame, Frame
	p.Add(grid)
	colours := Palette()
	for i := range scaled {
		one := scaled[i : i+1]
		col := colours[i%len(colours)]
		xb, err := plotter.NewXErrorBars(one)
		if err != nil {
			return fmt.Errorf("prediction chart: %w", err)
		}
		yb, err := plotter.NewYErrorBars(one)
		if err != nil {
			return fmt.Errorf("prediction chart: %w", err)
		}
		sc, err := plotter.NewScatter(one)
		if err != nil {
			return fmt.Errorf("prediction chart: %w", err)
		}
		xb.LineStyle.Color, yb.LineStyle.Color = col, col
		xb.LineStyle.Width, yb.LineStyle.Width = vg.Points(1.5), vg.Points(1)
		xb.CapWidth, yb.CapWidth = vg.Points(6), vg.Points(4)
		sc.GlyphStyle = draw.GlyphStyle{Color: col, Radius: vg.Points(4), Shape: draw.CircleGlyph{}}
		lb, err := plotter.NewLabels(plotter.XYLabels{XYs: plotter.XYs{{X: one[0].Seconds, Y: one[0].Quality}}, Labels: []string{one[0].Name}})
		if err != nil {
			return fmt.Errorf("prediction chart: %w", err)
		}
		lb.TextStyle[0].Font = chartFont(false, 8)
		lb.TextStyle[0].Color = Soft
		lb.Offset = vg.Point{X: vg.Points(5), Y: vg.Points(3)}
		p.Add(xb, yb, sc, lb)
	}
	fixPredictionRanges(p, scaled)
	wt, err := p.WriterTo(8*vg.Inch, 5*vg.Inch, "png")
	if err != nil {
		return fmt.Errorf("prediction chart: %w", err)
	}
	_, err = wt.WriteTo(w)
	return err
}

// fixPredictionRanges starts the time axis at 0 with room for the labels
// and keeps the quality axis at least 0.02 wide, as DrawTradeoff does, and
// not above 1.
func fixPredictionRanges(p *plot.Plot, pts predXY) {
	lo, hi, right := math.Inf(1), math.Inf(-1), 0.0
	for i, pt := range pts {
		dlo, dhi := pts.YError(i)
		lo, hi = math.Min(lo, pt.Quality-dlo), math.Max(hi, pt.Quality+dhi)
		right = math.Max(right, pt.High)
	}
	if hi-lo < 0.02 {
		mid := (hi + lo) / 2
		lo, hi = mid-0.01, mid+0.01
	}
	pad := (hi - lo) * 0.1
	// Scores are at most 1: a window that would pass it slides down.
	shift := math.Max(0, hi+pad-1)
	p.X.Min, p.X.Max = 0, right*1.25
	p.Y.Min, p.Y.Max = lo-pad-shift, hi+pad-shift
}
