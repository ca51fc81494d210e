package knn

// Random choices of the approximate searches.
//
// Every random choice that must repeat bit for bit (NN-descent sampling,
// tree splits, random list filling) draws from a rowRand seeded by (seed,
// stream, row): a per-row stream that does not depend on which goroutine
// handles the row or in what order rows are handled. math/rand/v2 offers no
// generator that splits this way without changing the numbers drawn, so this
// small splitmix64 generator is kept by hand.

// rowRand is a splitmix64 generator (Steele, Lea & Flood 2014, "Fast
// splittable pseudorandom number generators", OOPSLA).
type rowRand struct{ s uint64 }

// mix64 is splitmix64's finaliser.
func mix64(z uint64) uint64 {
	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9
	z = (z ^ (z >> 27)) * 0x94d049bb133111eb
	return z ^ (z >> 31)
}

// newRowRand returns the generator of one (seed, stream, row).
func newRowRand(seed, stream, row uint64) rowRand {
	return rowRand{s: mix64(seed^mix64(stream*0x9e3779b97f4a7c15+0x632be59bd9b4e019)) ^ mix64(row+0x2545f4914f6cdd1d)}
}

func (r *rowRand) next() uint64 {
	r.s += 0x9e3779b97f4a7c15
	return mix64(r.s)
}

// intn returns a value in [0, n) for n > 0 (multiply-shift; the bias is
// below 2⁻³² for the list sizes used here).
func (r *rowRand) intn(n int) int {
	return int((r.next() >> 32) * uint64(n) >> 32)
}

// partialShuffle moves a uniform random choice of min(m, len(a)) elements of a
// to its front (partial Fisher–Yates).
func partialShuffle[T any](a []T, m int, r *rowRand) {
	if len(a) <= m {
		return
	}
	for t := 0; t < m; t++ {
		j := t + r.intn(len(a)-t)
		a[t], a[j] = a[j], a[t]
	}
}

// fillRandom completes row (the list of row i, whose first have entries are
// set and distinct) with distinct random rows other than i and those already
// there. seen is scratch space.
func fillRandom(row []int32, have, i, n int, seed uint64, seen map[int32]struct{}) {
	k := len(row)
	r := newRowRand(seed, 1<<41, uint64(i))
	if 2*k >= n { // dense: a partial shuffle of the rows left
		clear(seen)
		for _, v := range row[:have] {
			seen[v] = struct{}{}
		}
		rest := make([]int32, 0, n-1)
		for j := 0; j < n; j++ {
			if _, ok := seen[int32(j)]; !ok && j != i {
				rest = append(rest, int32(j))
			}
		}
		partialShuffle(rest, k-have, &r)
		copy(row[have:], rest[:k-have])
		return
	}
	clear(seen)
	for _, v := range row[:have] {
		seen[v] = struct{}{}
	}
	for j := have; j < k; {
		v := int32(r.intn(n))
		if int(v) == i {
			continue
		}
		if _, ok := seen[v]; ok {
			continue
		}
		seen[v] = struct{}{}
		row[j] = v
		j++
	}
}
