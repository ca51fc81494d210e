package knn

import (
	"fmt"
	"strings"

	"nightjar/internal/core"
)

// Method selects how Build finds the neighbours.
type Method int

const (
	// ByExact is the exact search (Exact): O(N²·D), refused above ExactLimit
	// rows.
	ByExact Method = iota
	// ByDescent is NN-descent started from random projection trees
	// (Descent): bit-reproducible, the method to prefer for large tables.
	ByDescent
	// ByHNSW is NN-descent started from HNSW index results (HNSW).
	ByHNSW
)

// String returns the method's name as ParseMethod accepts it.
func (m Method) String() string {
	switch m {
	case ByExact:
		return "exact"
	case ByDescent:
		return "descent"
	case ByHNSW:
		return "hnsw"
	}
	return fmt.Sprintf("Method(%d)", int(m))
}

// ParseMethod returns the method named s ("exact", "descent" or "hnsw",
// case insensitive), or an error listing the accepted names. Choosing a
// method automatically by table size is left to the caller.
func ParseMethod(s string) (Method, error) {
	switch strings.ToLower(strings.TrimSpace(s)) {
	case "exact":
		return ByExact, nil
	case "descent":
		return ByDescent, nil
	case "hnsw":
		return ByHNSW, nil
	}
	return 0, fmt.Errorf("unknown neighbour method %q (want exact, descent or hnsw)", s)
}

// BuildOptions are the settings Build passes on to the method it runs; every
// other setting is the method's default (DefaultDescent, DefaultHNSW).
type BuildOptions struct {
	// Threads and Metric, for every method.
	Options
	// Seed drives the random choices of the approximate methods.
	Seed uint64
	// RecallGoal is the estimated recall at which refinement stops
	// (RefineOptions.StopRecall; 0 means the default 0.99, > 1 never stops
	// on it).
	RecallGoal float64
	// InPlace lets ByDescent reorder the rows of x while it runs
	// (DescentOptions.InPlace); nothing else may use x during the call.
	InPlace bool
	// Progress, if not nil, is called with a phase name and rows done out of
	// total: "exact" for ByExact, "refine 1", "refine 2", … for the
	// approximate methods, and also "build" (index rows) and "query" for
	// ByHNSW. done restarts at each phase.
	Progress func(phase string, done, total int64)
}

// Build returns the k-nearest-neighbour graph of the rows of x by method m
// (Exact, Descent or HNSW, whose documents give the preconditions, costs and
// errors), with the method's default options and the caller's opt. For
// ByExact the stats are empty.
//
// Memory. The approximate methods leave garbage while they start (HNSW's
// searches about 20 KB per query, Descent's trees and sort keys, the exact
// search of the stopping probe a copy of the rows) while the refinement's
// arrays are being allocated. Build changes no process-wide setting, but a
// caller that watches peak memory in a large search may lower GOGC
// (runtime/debug.SetGCPercent) around the call: the live heap is mostly
// pointer-free arrays, so collections are cheap. Measured with HNSW on the
// 1,000,000 × 50 demo table (k = 90, 2 threads): with the default GOGC = 100
// the heap grows to twice the live graph before each collection, 1.9 GB
// resident while the index is queried; with GOGC = 20 during the search the
// whole process peaked at 2.04 GB (under 2 GiB) at the end of the neighbour
// phase.
func Build(x core.Matrix, k int, m Method, opt BuildOptions) (*core.Graph, Stats, error) {
	switch m {
	case ByExact:
		eo := ExactOptions{Options: opt.Options}
		if opt.Progress != nil {
			eo.Progress = func(done, total int64) { opt.Progress("exact", done, total) }
		}
		g, err := Exact(x, k, eo)
		return g, Stats{}, err
	case ByDescent:
		do := DefaultDescent(k)
		do.RefineOptions = opt.refine(do.RefineOptions)
		do.InPlace = opt.InPlace
		return Descent(x, k, do)
	case ByHNSW:
		ho := DefaultHNSW(k)
		ho.RefineOptions = opt.refine(ho.RefineOptions)
		return HNSW(x, k, ho)
	}
	return nil, Stats{}, fmt.Errorf("neighbours: unknown method %v", m)
}

// refine returns the refinement settings def with the caller's own.
func (o BuildOptions) refine(def RefineOptions) RefineOptions {
	def.Options = o.Options
	def.Seed = o.Seed
	def.StopRecall = o.RecallGoal
	def.Progress = o.Progress
	return def
}
