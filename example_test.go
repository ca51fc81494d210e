package nightjar_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"

	"nightjar"
)

// Example maps an in-memory matrix: 300 rows of 10 features around three
// centres (invented data), and checks that the map keeps the groups apart.
func Example() {
	rng := rand.New(rand.NewPCG(1, 2))
	x := nightjar.Matrix{N: 300, D: 10, Data: make([]float32, 300*10)}
	group := make([]string, x.N)
	for i := range x.N {
		g := i % 3
		group[i] = []string{"kestrel", "plover", "wren"}[g]
		for j := range x.D {
			x.Data[i*x.D+j] = float32(10*g*(j%2)) + float32(rng.NormFloat64())
		}
	}
	dir, err := os.MkdirTemp("", "nightjar-example-")
	if err != nil {
		panic(err)
	}
	defer os.RemoveAll(dir)

	s := nightjar.DefaultSettings()
	s.Perplexity, s.Iterations, s.EarlyIterations = 20, 400, 100
	labels := &nightjar.Column{Name: "bird", Strings: group}
	res, err := nightjar.Embed(context.Background(), nightjar.FromMatrix(x, nil, labels), dir+"/run", s, nightjar.DefaultRuntime(), nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	q := res.Report.Quality
	fmt.Printf("%d rows mapped to %d-D\n", len(res.Map)/2, s.Dims)
	fmt.Printf("10-NN label accuracy in the map above 0.95: %v\n", *q.LabelAccuracyMap > 0.95)
	// Output:
	// 300 rows mapped to 2-D
	// 10-NN label accuracy in the map above 0.95: true
}

// ExampleEstimateMemory sets the memory a run of the default settings will
// need beside a machine's: 10⁶ and 10⁷ rows of 50 features, with the
// affinity entries of the 1,000,000-row demo run (130,690,900) and ten
// times as many.
func ExampleEstimateMemory() {
	s := nightjar.DefaultSettings()
	for _, c := range []struct {
		rows    int
		entries int64
	}{{1_000_000, 130_690_900}, {10_000_000, 1_306_909_000}} {
		e := nightjar.EstimateMemory(c.rows, 50, s, c.entries)
		fmt.Printf("%d rows: peak %.1f GiB in the %s phase\n", c.rows, float64(e.Peak)/(1<<30), e.PeakPhase)
		for _, ph := range e.Phases {
			fmt.Printf("  %-10s %5.1f GiB\n", ph.Phase, float64(ph.Bytes)/(1<<30))
		}
	}
	// Output:
	// 1000000 rows: peak 2.0 GiB in the optimiser phase
	//   neighbours   2.0 GiB
	//   affinities   2.0 GiB
	//   optimiser    2.0 GiB
	//   scores       0.3 GiB
	// 10000000 rows: peak 19.2 GiB in the optimiser phase
	//   neighbours  19.1 GiB
	//   affinities  19.1 GiB
	//   optimiser   19.2 GiB
	//   scores       2.4 GiB
}
