package figure

import (
	"fmt"
	"io"
	"math"

	xfont "golang.org/x/image/font"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/text"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// TradeoffPoint is one run of a sweep on the accuracy-versus-speed chart.
type TradeoffPoint struct {
	Name    string  // label written beside the point
	Seconds float64 // wall time (x axis)
	Quality float64 // a score in [0, 1] (y axis); NaN points are left out
}

// DrawTradeoff writes a PNG chart of quality against wall time for the runs of
// a sweep, each point labelled with its setting. The chart is small (a few
// dozen points), so gonum/plot draws it, in the style of the map: the same
// font (Liberation Sans, bold title) and inks.
func DrawTradeoff(w io.Writer, title, quality string, pts []TradeoffPoint) error {
	p := plot.New()
	styleChart(p)
	p.Title.Text = title
	p.X.Label.Text = "wall time (s)"
	p.Y.Label.Text = quality
	var xys plotter.XYs
	var labels []string
	for _, pt := range pts {
		if math.IsNaN(pt.Quality) || math.IsNaN(pt.Seconds) {
			continue
		}
		xys = append(xys, plotter.XY{X: pt.Seconds, Y: pt.Quality})
		labels = append(labels, pt.Name)
	}
	if len(xys) == 0 {
		return fmt.Errorf("tradeoff chart: no run has both a time and a %s score", quality)
	}
	sc, err := plotter.NewScatter(xys)
	if err != nil {
		return fmt.Errorf("tradeoff chart: %w", err)
	}
	sc.GlyphStyle.Radius = vg.Points(3)
	lb, err := plotter.NewLabels(plotter.XYLabels{XYs: xys, Labels: labels})
	if err != nil {
		return fmt.Errorf("tradeoff chart: %w", err)
	}
	sc.GlyphStyle.Color = design[0].RGB
	sc.GlyphStyle.Shape = draw.CircleGlyph{}
	for i := range lb.TextStyle {
		lb.TextStyle[i].Font = chartFont(false, 8)
		lb.TextStyle[i].Color = Soft
		lb.Offset = vg.Point{X: vg.Points(4), Y: vg.Points(2)}
	}
	grid := plotter.NewGrid()
	grid.Vertical.Color, grid.Horizontal.Color = Frame, Frame
	p.Add(grid, sc, lb)
	// Fix the ranges: x from 0 with room for the labels; y at least 0.02
	// wide, so that differences in the fourth decimal do not fill the chart.
	lo, hi, right := math.Inf(1), math.Inf(-1), 0.0
	for _, xy := range xys {
		lo, hi, right = math.Min(lo, xy.Y), math.Max(hi, xy.Y), math.Max(right, xy.X)
	}
	if hi-lo < 0.02 {
		mid := (hi + lo) / 2
		lo, hi = mid-0.01, mid+0.01
	}
	pad := (hi - lo) * 0.1
	p.X.Min, p.X.Max = 0, right*1.2
	p.Y.Min, p.Y.Max = lo-pad, hi+pad
	wt, err := p.WriterTo(8*vg.Inch, 5*vg.Inch, "png")
	if err != nil {
		return fmt.Errorf("tradeoff chart: %w", err)
	}
	_, err = wt.WriteTo(w)
	return err
}

// chartFont returns Liberation Sans (bold or regular) at size points.
func chartFont(heavy bool, size float64) font.Font {
	f := font.Font{Typeface: "Liberation", Variant: "Sans", Size: vg.Points(size)}
	if heavy {
		f.Weight = xfont.WeightBold
	}
	return f
}

// styleChart gives a gonum plot the figures' shared style.
func styleChart(p *plot.Plot) {
	p.Title.TextStyle = text.Style{Color: Ink, Font: chartFont(true, 14), Handler: p.Title.TextStyle.Handler, XAlign: p.Title.TextStyle.XAlign, YAlign: p.Title.TextStyle.YAlign}
	p.Title.Padding = vg.Points(8)
	for _, ax := range []*plot.Axis{&p.X, &p.Y} {
		ax.Label.TextStyle.Font = chartFont(false, 11)
		ax.Label.TextStyle.Color = Ink
		ax.Tick.Label.Font = chartFont(false, 9)
		ax.Tick.Label.Color = Soft
		ax.LineStyle.Color = Frame
		ax.Tick.LineStyle.Color = Frame
	}
}
