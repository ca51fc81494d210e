// Package core holds the value types that every part of a run shares: the
// feature matrix, the k-nearest-neighbour graph and the sparse affinity
// matrix in compressed sparse row form. It imports only the standard
// library, so the numeric packages can use these types without pulling in
// the table readers.
//
// The root package nightjar re-exports them with type aliases, so library
// users name them nightjar.Matrix, nightjar.Graph and nightjar.CSR.
package core
