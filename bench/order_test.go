package bench

import (
	"slices"
	"testing"
)

func TestRunOrder(t *testing.T) {
	got := RunOrder(2, 3, false, 1)
	want := []Slot{{0, 1}, {1, 1}, {0, 2}, {1, 2}, {0, 3}, {1, 3}}
	if !slices.Equal(got, want) {
		t.Errorf("interleaved: %v, want %v", got, want)
	}
	a, b := RunOrder(4, 5, true, 7), RunOrder(4, 5, true, 7)
	if !slices.Equal(a, b) {
		t.Error("the same seed should give the same order")
	}
	if slices.Equal(a, RunOrder(4, 5, false, 7)) {
		t.Error("five shuffled rounds of four came out in order")
	}
	// Every round holds every setting once.
	for r := 0; r < 5; r++ {
		seen := map[int]bool{}
		for _, s := range a[4*r : 4*r+4] {
			if s.Repeat != r+1 || seen[s.Setting] {
				t.Fatalf("round %d: %v", r+1, a[4*r:4*r+4])
			}
			seen[s.Setting] = true
		}
	}
}
