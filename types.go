package nightjar

import (
	"nightjar/gradient"
	"nightjar/ingest"
	"nightjar/internal/core"
)

// The value types a run passes between its phases, named here so that
// library users can build and read them.
type (
	// Matrix is an N×D float32 matrix stored row-major: element (i, j) is
	// Data[i*D+j].
	Matrix = core.Matrix
	// Graph is a k-nearest-neighbour graph: row i's neighbours are
	// Index[i*K:(i+1)*K], nearest first, squared distances in Dist2.
	Graph = core.Graph
	// CSR is a sparse N×N matrix in compressed sparse row form, the layout
	// of the affinity matrix P.
	CSR = core.CSR
	// Column is an id or label column carried through a run: exactly one of
	// Ints and Strings is set.
	Column = ingest.Column
)

// exactKLRows is the largest table whose report gives the exact KL
// divergence (an O(N²) sum); above it the report gives the optimiser's
// value with Z from its approximate repulsion.
const exactKLRows = gradient.ExactLimit
