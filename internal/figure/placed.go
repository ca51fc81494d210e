package figure

import "fmt"

// PlacedMap returns the Map of rows placed into a reference map: the
// reference's points ref (Nr×dims) drawn in the Reference grey, and the
// placed points placed (Np×dims) on top, coloured by labels (one per placed
// point, in the legend under heading) or, with nil labels, all in Plain.
// The reference rows are counted in the legend's "reference rows" line; the
// labels' counts are the placed rows'. It returns an error when the sizes
// do not fit dims or the labels.
func PlacedMap(ref, placed []float64, dims int, heading string, labels []string) (Map, error) {
	if dims != 2 && dims != 3 || len(ref)%dims != 0 || len(placed)%dims != 0 {
		return Map{}, fmt.Errorf("placed map: %d reference and %d placed values are not rows of %d dimensions", len(ref), len(placed), dims)
	}
	nr, np := len(ref)/dims, len(placed)/dims
	if labels != nil && len(labels) != np {
		return Map{}, fmt.Errorf("placed map: %d labels for %d placed rows", len(labels), np)
	}
	m := Map{Y: make([]float64, 0, len(ref)+len(placed)), Dims: dims, Placed: make([]bool, nr+np)}
	m.Y = append(append(m.Y, ref...), placed...)
	for i := nr; i < nr+np; i++ {
		m.Placed[i] = true
	}
	if labels == nil {
		return m, nil
	}
	groups, codes := Legend(labels)
	// A reference row is drawn in the Reference grey whatever its code;
	// code 0 keeps it out of the legend's count of points without a value.
	m.Colour = Colouring{Heading: heading, Groups: groups, Codes: append(make([]int32, nr), codes...)}
	return m, nil
}
