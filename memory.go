package nightjar

import (
	"fmt"
	"strings"

	"nightjar/gradient"
	"nightjar/knn"
)

// MemoryEstimate is the resident memory a run is expected to need, phase by
// phase, from the sizes of the arrays each phase holds at once. Sizes are
// in bytes; GiB = 2³⁰ bytes.
type MemoryEstimate struct {
	Rows, Features, Neighbours int
	// Entries is the number of affinity entries assumed (before the
	// affinities exist: AssumedEntriesPerRow·k per row) or counted.
	Entries int64
	Counted bool // Entries was counted, not assumed
	// Phases are in run order; Peak is the largest phase's Bytes and
	// PeakPhase its name.
	Phases    []PhaseMemory
	Peak      int64
	PeakPhase string
}

// PhaseMemory is one phase's estimate: the arrays it holds, and their sum
// times MemorySlack plus MemoryBase.
type PhaseMemory struct {
	Phase string
	Bytes int64
	Parts []MemoryPart
}

// MemoryPart is one array (or group of arrays) a phase holds.
type MemoryPart struct {
	Name  string
	Bytes int64
}

// MemorySlack multiplies the arrays' sum to give resident memory: the Go
// runtime, garbage not yet collected and pages not yet handed back.
// Measured with the command line (which sets Runtime.ReturnMemory) on
// 2026-12-03: the 1,000,000-row demo holds about 2,390 MiB of arrays in
// its optimiser (the table of EstimateMemory) and peaked at 2,685 MiB
// resident (×1.12), the 1,000,000 document embeddings 2,600 MiB and 2,890
// MiB (×1.11), the 100,000-row demo with MemoryBase taken off 235 and 282
// MiB (×1.20); 1.15 keeps the large runs on the safe side. A library caller
// without ReturnMemory peaks higher (×1.17 more at 1,000,000 rows). With
// fewer arrays held (features on disk, P renumbered in its own memory) the
// ratio was lower on the same day: 1.82 GiB resident for 1.66 GiB of arrays
// at 1,000,000 demo rows (×1.10), 17.90 GiB for 16.76 GiB at 10,000,000
// (×1.07).
const MemorySlack = 1.15

// MemoryBase is added to every phase's estimate: the program, the Go
// runtime and the outputs' buffers. Measured on 2026-12-03 with the command
// line, the demo's peaks at 10,000, 70,000 and 100,000 rows (130, 299 and
// 382 MiB) are its arrays times MemorySlack plus 103 to 112 MiB.
const MemoryBase = 100 << 20

// AssumedEntriesPerRow is the number of affinity entries per row and
// neighbour assumed before the affinities exist: symmetrising a
// k-neighbour graph gives between k and 2k entries per row, 1.45·k on the
// 1,000,000-row demo and 1.60·k on 1,000,000 document embeddings.
const AssumedEntriesPerRow = 1.6

// EstimateMemory estimates the peak resident memory of a run of s on a
// table of rows × features (features as the run holds them: after any
// reduction). entries is the number of affinity entries, or 0 to assume
// AssumedEntriesPerRow·k per row. The settings must be valid; with fewer
// than one row or feature the estimate is empty.
//
// What each phase holds, in bytes (N rows, D features, k neighbours, E
// entries, s = ⌈k/2⌉ samples of NN-descent):
//
//	features                          4·N·D, while the neighbours are
//	                                  searched; then on disk only
//	                                  (features.njs), read back (4·N·D:
//	                                  the values in the buffer the file
//	                                  is read into) for the optimiser's
//	                                  start and for the scores
//	neighbour graph                   8·N·k (int32 index, float32 distance)
//	NN-descent work arrays            N·(k + 8·s + 8·s + 48): entry states,
//	                                  forward and reverse samples, offsets,
//	                                  counts, k-th distances, row locks and
//	                                  the row order
//	recall check, after them          4·N·D + 4·N: a centred copy of the
//	                                  features and their norms (the exact
//	                                  search's screen); the larger of the
//	                                  two counts
//	affinities                        8·E + 8·(N+1) (int32 column, float32
//	                                  value, int64 row offsets)
//	affinities renumbered for the     4·E + 8·(N+1) more while the optimiser
//	optimiser's memory locality       starts: the new columns beside P,
//	                                  then the new values in the old
//	                                  columns' place (gradient.NewConsume);
//	                                  P's size alone after
//	optimiser                         N·(48·dims + 16): the start, positions,
//	                                  update, gains, gradient and repulsion
//	                                  (float64), the order and its inverse;
//	                                  plus the grid's 16·order·N weights and
//	                                  8·N bases, or the tree's N·(48 + 2·64)
//	                                  codes, order, positions and nodes
//
// The exact neighbour search holds the features and the graph only (its
// tiles are small). The HNSW start's index on its sample is not counted,
// nor is reading the table (with its reduction, for a wide one): the
// estimate is made once the table is read. For MNIST's 784 columns the
// reading set the run's peak (518 MiB after reading, 615 MiB in all,
// against 309 MiB estimated for the phases after it).
//
// Checked against the peaks measured on 2026-12-03 (bench/RESULTS.md):
// 288 and 370 MiB estimated against 299 and 382 MiB at 70,000 and 100,000
// demo rows; 2.78 GiB against 2.62 GiB at 1,000,000 (2,685 MiB in the
// run's report); 3.02 GiB against 2.82 GiB for 1,000,000 document
// embeddings. With the features on disk after the neighbour search and P
// renumbered in its own memory: 2.01 GiB against 1.82 GiB at 1,000,000
// demo rows, 19.38 GiB against 17.90 GiB at 10,000,000.
func EstimateMemory(rows, features int, s Settings, entries int64) MemoryEstimate {
	n, d := int64(rows), int64(features)
	k := int64(s.neighbourCount(rows))
	e := MemoryEstimate{Rows: rows, Features: features, Neighbours: int(k), Entries: entries, Counted: entries > 0}
	if rows < 1 || features < 1 {
		return e
	}
	if entries <= 0 {
		e.Entries = int64(AssumedEntriesPerRow * float64(n*k))
	}
	feat := MemoryPart{"features", 4 * n * d}
	graph := MemoryPart{"neighbour graph", 8 * n * k}
	p := MemoryPart{"affinities", 8*e.Entries + 8*(n+1)}
	search := []MemoryPart{feat, graph}
	if m, err := s.neighbourMethod(rows); err == nil && m != knn.ByExact {
		smp := (k + 1) / 2
		work := MemoryPart{"NN-descent work arrays", n * (k + 16*smp + 48)}
		check := MemoryPart{"recall check's copy of the features", 4*n*d + 4*n}
		if s.CheckRecall > 0 && check.Bytes > work.Bytes {
			work = check
		}
		search = append(search, work)
	}
	dims := int64(s.Dims)
	opt := MemoryPart{"optimiser", n * (48*dims + 16)}
	if gp, err := s.gradientParams(rows, 1); err == nil {
		switch gp.Resolve(rows) {
		case gradient.Grid:
			order := int64(gradient.DefaultGridOrder)
			if gp.GridOrder > 0 {
				order = int64(gp.GridOrder)
			}
			opt.Bytes += n * (16*order + 8)
		case gradient.Tree:
			opt.Bytes += n * (48 + 2*64)
		}
	}
	// The optimiser's start reads the features back while P is held, before
	// P is renumbered: whichever of the two is larger sets the phase.
	extra := MemoryPart{"affinities renumbered", 4*e.Entries + 8*(n+1)}
	if back := 4 * n * d; back > extra.Bytes {
		extra = MemoryPart{"features read back for the start", back}
	}
	e.add("neighbours", search...)
	e.add("affinities", graph, p)
	e.add("optimiser", p, extra, opt)
	e.add("scores", MemoryPart{"features read back", 4 * n * d}, MemoryPart{"map", 8 * n * dims})
	return e
}

// add appends a phase made of parts, and keeps the peak.
func (e *MemoryEstimate) add(phase string, parts ...MemoryPart) {
	var sum int64
	for _, p := range parts {
		sum += p.Bytes
	}
	b := int64(MemorySlack*float64(sum)) + MemoryBase
	e.Phases = append(e.Phases, PhaseMemory{Phase: phase, Bytes: b, Parts: parts})
	if b > e.Peak {
		e.Peak, e.PeakPhase = b, phase
	}
}

// String gives the peak, its phase and the parts of that phase, in GiB.
func (e MemoryEstimate) String() string {
	var parts []string
	for _, ph := range e.Phases {
		if ph.Phase != e.PeakPhase {
			continue
		}
		for _, p := range ph.Parts {
			parts = append(parts, fmt.Sprintf("%s %s", p.Name, gib(p.Bytes)))
		}
	}
	how := "assumed"
	if e.Counted {
		how = "counted"
	}
	return fmt.Sprintf("%s in the %s phase (%s; %d affinity entries %s)", gib(e.Peak), e.PeakPhase, strings.Join(parts, ", "), e.Entries, how)
}

// gib formats bytes in GiB with two decimals, or in MiB below 1 GiB.
func gib(b int64) string {
	if b < 1<<30 {
		return fmt.Sprintf("%.1f MiB", float64(b)/(1<<20))
	}
	return fmt.Sprintf("%.2f GiB", float64(b)/(1<<30))
}

// MemoryError is a run refused before its work because its estimated peak
// memory is above Runtime.MemoryCeiling.
type MemoryError struct {
	Input    string // the table's path ("" for a table in memory)
	Estimate MemoryEstimate
	Ceiling  float64 // GiB
}

// Error names the table and its size, the estimate, its largest phase and
// the ceiling.
func (e *MemoryError) Error() string {
	in := e.Input
	if in == "" {
		in = "the table"
	}
	return fmt.Sprintf("%s (%d rows × %d features): estimated peak memory %s is above the ceiling of %g GiB (--ram-ceiling); nothing more was computed: a smaller --perplexity or --reduce, or a machine with more memory, would lower it",
		in, e.Estimate.Rows, e.Estimate.Features, e.Estimate, e.Ceiling)
}

// checkMemory estimates the run's peak memory with entries affinity
// entries (0: assumed), records the estimate in the report, notes it, and
// refuses the run when it is above Runtime.MemoryCeiling.
func (j *job) checkMemory(entries int64) error {
	e := EstimateMemory(j.table.N, j.table.D, j.s, entries)
	r := &EstimatedMemory{PeakBytes: e.Peak, PeakPhase: e.PeakPhase, PhaseBytes: map[string]int64{}, Entries: e.Entries, EntriesCounted: e.Counted}
	for _, ph := range e.Phases {
		r.PhaseBytes[ph.Phase] = ph.Bytes
	}
	j.rep.MemoryEstimate = r
	j.obs.Note("estimated peak memory: " + e.String())
	if c := j.rt.MemoryCeiling; c > 0 && float64(e.Peak) > c*(1<<30) {
		return &MemoryError{Input: j.s.Input, Estimate: e, Ceiling: c}
	}
	return nil
}
