package par

import (
	"sync"
	"sync/atomic"
)

// Blocks cuts [0, n) into blocks of size block and calls fn(worker, b, lo,
// hi) for each block b = lo/block, from at most threads goroutines (fewer
// than 1 means one). worker is in [0, threads) and names per-goroutine
// scratch space. Blocks are handed out in increasing order, but finish in
// any order: fn must write only to block- or row-owned places. With one
// goroutine (or one block) the blocks run in order on the calling
// goroutine. Blocks panics if block < 1.
func Blocks(n, block, threads int, fn func(worker, b, lo, hi int)) {
	if block < 1 {
		panic("par.Blocks: block size below 1")
	}
	nb := (n + block - 1) / block
	threads = max(1, min(threads, nb))
	if threads <= 1 {
		for b := 0; b < nb; b++ {
			fn(0, b, b*block, min(n, (b+1)*block))
		}
		return
	}
	var next atomic.Int64
	var wg sync.WaitGroup
	wg.Add(threads)
	for w := 0; w < threads; w++ {
		go func(w int) {
			defer wg.Done()
			for {
				b := int(next.Add(1) - 1)
				if b >= nb {
					return
				}
				fn(w, b, b*block, min(n, (b+1)*block))
			}
		}(w)
	}
	wg.Wait()
}

// Map runs work over the blocks of [0, n) like Blocks, each goroutine with
// the state newWorker gives it, and returns the blocks' results in block
// order, ready to be combined in that order.
func Map[T any](n, block, threads int, newWorker func() func(lo, hi int) T) []T {
	nb := (n + block - 1) / block
	res := make([]T, nb)
	threads = max(1, min(threads, nb))
	work := make([]func(lo, hi int) T, threads)
	Blocks(n, block, threads, func(w, b, lo, hi int) {
		if work[w] == nil {
			work[w] = newWorker()
		}
		res[b] = work[w](lo, hi)
	})
	return res
}

// Sum adds s in index order: the block order of a per-block reduction.
func Sum(s []float64) float64 {
	var t float64
	for _, v := range s {
		t += v
	}
	return t
}

// FirstError keeps the error of the lowest-numbered block that failed, so
// the error a parallel routine reports does not depend on scheduling. The
// zero value is ready to use and safe for concurrent use.
type FirstError struct {
	mu  sync.Mutex
	at  int
	err error
}

// Set records err for the block starting at lo, unless a lower block's error
// is already recorded. A nil err is ignored.
func (e *FirstError) Set(lo int, err error) {
	if err == nil {
		return
	}
	e.mu.Lock()
	defer e.mu.Unlock()
	if e.err == nil || lo < e.at {
		e.at, e.err = lo, err
	}
}

// Err returns the recorded error, or nil.
func (e *FirstError) Err() error {
	e.mu.Lock()
	defer e.mu.Unlock()
	return e.err
}
