package figure

import (
	"fmt"
	"image/color"
	"math"
)

// Colouring says how the points of a map are coloured: by category (Groups
// and Codes), by number (Values and Scale), or not at all (the zero value).
type Colouring struct {
	// Heading names what colours the points (a column's name): the heading
	// of the legend or the colour bar.
	Heading string
	// Groups are the categories in legend order; Codes[i] is point i's
	// group, or −1 for a point without a value (drawn in Missing).
	Groups []Group
	Codes  []int32
	// Values[i] is point i's number, NaN for none; Scale maps them to colours.
	Values []float64
	Scale  Scale
}

// Categories returns the colouring of points by labels (see Legend); nil
// labels give no colouring.
func Categories(heading string, labels []string) Colouring {
	if labels == nil {
		return Colouring{}
	}
	g, c := Legend(labels)
	return Colouring{Heading: heading, Groups: g, Codes: c}
}

// Numbers returns the colouring of points by values on the continuous scale
// clipped to their 1st–99th percentiles (NewScale); NaN marks no value.
func Numbers(heading string, values []float64) Colouring {
	return Colouring{Heading: heading, Values: values, Scale: NewScale(values)}
}

// IsNumeric tells whether c colours by number.
func (c Colouring) IsNumeric() bool { return c.Values != nil }

// IsCategorical tells whether c colours by category.
func (c Colouring) IsCategorical() bool { return c.Codes != nil }

// NoValue returns the number of points without a value.
func (c Colouring) NoValue() int {
	if c.IsNumeric() {
		return c.Scale.Missing
	}
	k := 0
	for _, g := range c.Codes {
		if g < 0 {
			k++
		}
	}
	return k
}

// check checks c against n points.
func (c Colouring) check(n int) error {
	switch {
	case c.Codes != nil && c.Values != nil:
		return fmt.Errorf("a colouring by both category and number")
	case c.Codes != nil && len(c.Codes) != n:
		return fmt.Errorf("%d labels for %d points", len(c.Codes), n)
	case c.Values != nil && len(c.Values) != n:
		return fmt.Errorf("%d values for %d points", len(c.Values), n)
	}
	for i, g := range c.Codes {
		if g < -1 || int(g) >= len(c.Groups) {
			return fmt.Errorf("point %d has group %d of %d", i, g, len(c.Groups))
		}
	}
	if c.Values != nil && (math.IsNaN(c.Scale.Lo) || math.IsNaN(c.Scale.Hi) || math.IsInf(c.Scale.Lo, 0) || math.IsInf(c.Scale.Hi, 0)) {
		return fmt.Errorf("colour scale %g–%g is not finite", c.Scale.Lo, c.Scale.Hi)
	}
	return nil
}

// colour returns the colour of point i.
func (c Colouring) colour(i int) color.RGBA {
	switch {
	case c.Codes != nil:
		if g := c.Codes[i]; g >= 0 {
			return c.Groups[g].Colour
		}
		return Missing
	case c.Values != nil:
		return c.Scale.Colour(c.Values[i])
	}
	return Plain
}
