package score

import (
	"fmt"

	"nightjar/internal/par"
)

// sampleStream is the random stream of Sample ("sample" in ASCII), so that its
// rows differ from other samples drawn with the same seed.
const sampleStream = 0x73616d706c65

// Sample returns min(size, n) distinct row numbers drawn uniformly at random from
// [0, n), in increasing order, deterministic for (n, size, seed) (par.Sample on
// the stream sampleStream). size ≥ n gives all rows 0..n−1; size ≤ 0 gives an
// empty sample. Sample panics if n < 0 or n > math.MaxInt32+1.
func Sample(n, size int, seed uint64) []int32 {
	return par.Sample(n, size, seed, sampleStream)
}

// sampleRows checks the sample (nil = all rows) against n.
func sampleRows(sample []int32, n int) []int32 {
	if sample == nil {
		return par.Identity(n)
	}
	if len(sample) == 0 {
		panic("score: empty sample")
	}
	for _, i := range sample {
		if i < 0 || int(i) >= n {
			panic(fmt.Sprintf("score: sampled row %d outside [0, %d)", i, n))
		}
	}
	return sample
}
