package bench

import "math/rand/v2"

// Slot is one run of a sweep: which setting, and which repeat of it.
type Slot struct {
	Setting int // index of the setting, 0-based
	Repeat  int // 1-based
}

// RunOrder returns the order of a sweep's runs: repeats rounds, each of
// which runs every one of the settings once, so that a slow spell of the
// machine falls on all settings alike instead of on one. Within a round
// the settings run in their own order (interleaved: A B C A B C …), or,
// with shuffle, in an order drawn from seed afresh for each round (the
// same seed gives the same order).
func RunOrder(settings, repeats int, shuffle bool, seed uint64) []Slot {
	rng := rand.New(rand.NewPCG(seed, 0x0de5))
	var out []Slot
	for r := 1; r <= repeats; r++ {
		perm := make([]int, settings)
		for i := range perm {
			perm[i] = i
		}
		if shuffle {
			rng.Shuffle(len(perm), func(i, j int) { perm[i], perm[j] = perm[j], perm[i] })
		}
		for _, s := range perm {
			out = append(out, Slot{Setting: s, Repeat: r})
		}
	}
	return out
}
