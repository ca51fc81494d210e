package knn

import "nightjar/internal/core"

// ClusteredRows gives the external benchmarks (package knn_test, which
// imports bench and so cannot live in package knn) the same invented
// clustered data as the tests: n rows in 50 columns around 40 centres.
func ClusteredRows(n int, seed uint64) core.Matrix { return axClustered(n, 50, 40, seed) }
