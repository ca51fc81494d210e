package checkpoint_test

import (
	"errors"
	"fmt"
	"log"
	"os"
	"path/filepath"

	"nightjar/checkpoint"
)

func ExampleWriteFile() {
	dir, err := os.MkdirTemp("", "nightjar-example")
	if err != nil {
		log.Fatal(err)
	}
	defer os.RemoveAll(dir)
	path := filepath.Join(dir, "graph.njs")

	// A 2-point neighbour graph with k = 1 (demo data).
	err = checkpoint.WriteFile(path, "graph", []checkpoint.Section{
		{Name: "indices", Data: checkpoint.EncodeValues([]int32{1, 0})},
		{Name: "distances", Data: checkpoint.EncodeValues([]float32{0.25, 0.25})},
	})
	if err != nil {
		log.Fatal(err)
	}

	sections, err := checkpoint.ReadFile(path, "graph")
	if err != nil {
		log.Fatal(err)
	}
	neighbours, err := checkpoint.SectionValues[int32](sections, "indices")
	if err != nil {
		log.Fatal(err)
	}
	fmt.Println(len(sections), "sections; neighbours:", neighbours)

	// Reading it as another kind is refused with a typed error.
	_, err = checkpoint.ReadFile(path, "affinity")
	var ke *checkpoint.KindError
	fmt.Println(errors.As(err, &ke), ke.Got)
	// Output:
	// 2 sections; neighbours: [1 0]
	// true graph
}

func ExampleRun() {
	base, err := os.MkdirTemp("", "nightjar-example")
	if err != nil {
		log.Fatal(err)
	}
	defer os.RemoveAll(base)
	dir := filepath.Join(base, "run1")

	run, err := checkpoint.Create(dir)
	if err != nil {
		log.Fatal(err)
	}
	m := run.Manifest()
	m.Phase, m.Iterations = checkpoint.PhaseOptimising, 1000
	if err := run.SaveManifest(m); err != nil {
		log.Fatal(err)
	}
	// The optimiser saves its state every 250 iterations (demo values).
	for it := 250; it <= 750; it += 250 {
		state := []checkpoint.Section{
			{Name: "embedding", Data: checkpoint.EncodeValues([]float64{float64(it), 0})},
		}
		if err := run.SaveState(it, state); err != nil {
			log.Fatal(err)
		}
	}

	// Later, after a kill: open the directory again and continue.
	again, err := checkpoint.Open(dir)
	if err != nil {
		log.Fatal(err)
	}
	it, sections, warnings, err := again.LoadState()
	if err != nil {
		log.Fatal(err)
	}
	for _, w := range warnings {
		fmt.Println("warning:", w)
	}
	y, _ := checkpoint.SectionValues[float64](sections, "embedding")
	fmt.Println("resume at iteration", it, "of", again.Manifest().Iterations, "embedding", y)

	files, _ := filepath.Glob(filepath.Join(dir, "*"))
	for _, f := range files {
		fmt.Println(filepath.Base(f))
	}
	// Output:
	// resume at iteration 750 of 1000 embedding [750 0]
	// manifest.json
	// state-000000500.njs
	// state-000000750.njs
}
