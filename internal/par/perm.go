package par

// The permutation helpers share one convention, the one of a gather: a
// permutation order says where each new position takes its row from, so
// after a gather row t holds the former row order[t].

// Inverse returns inv with inv[order[t]] = t.
func Inverse(order []int32) []int32 {
	inv := make([]int32, len(order))
	for t, i := range order {
		inv[i] = int32(t)
	}
	return inv
}

// Gather writes dst[t] = src[order[t]] for rows of w values. dst and src
// must not overlap.
func Gather[T any](dst, src []T, order []int32, w int) {
	for t, i := range order {
		copy(dst[t*w:t*w+w], src[int(i)*w:int(i)*w+w])
	}
}

// Scatter writes dst[order[t]] = src[t] for rows of w values, undoing
// Gather. dst and src must not overlap.
func Scatter[T any](dst, src []T, order []int32, w int) {
	for t, i := range order {
		copy(dst[int(i)*w:int(i)*w+w], src[t*w:t*w+w])
	}
}

// GatherInPlace reorders the rows of width w of data in place so that row
// t becomes the former row order[t], by following the permutation's cycles
// with one spare row (no second copy of data).
func GatherInPlace[T any](data []T, w int, order []int32) {
	done := make([]bool, len(order))
	tmp := make([]T, w)
	for s := range done {
		if done[s] {
			continue
		}
		copy(tmp, data[s*w:(s+1)*w])
		t := s
		for {
			done[t] = true
			src := int(order[t])
			if src == s {
				copy(data[t*w:(t+1)*w], tmp)
				break
			}
			copy(data[t*w:(t+1)*w], data[src*w:(src+1)*w])
			t = src
		}
	}
}
