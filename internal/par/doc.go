// Package par runs work over fixed-size blocks of an index range on a
// bounded number of goroutines, the one loop on which nightjar's promise
// "the same seed gives the same bits for any number of threads" rests.
//
// The promise needs three things of a caller: the block size is fixed (it
// never depends on the thread count), each block writes only to places it
// owns (its rows, or a per-block slot), and any reduction over blocks is
// added in block order afterwards (Sum, or the slice Map returns). Which
// goroutine runs which block then does not matter.
//
// It also holds the helpers that several packages need to agree on:
// seeded sampling without replacement and permutations of rows.
package par
