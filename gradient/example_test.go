package gradient_test

import (
	"fmt"
	"math"

	"nightjar/gradient"
	"nightjar/internal/core"
)

// Two points with p_12 = p_21 = 1/2: Q equals P wherever the points are, so
// KL = 0 and the gradient vanishes. With exaggeration ρ = 12 the gradient is
// 4(ρ·½ − ½)·w·(y_1 − y_2) = 22·w·(y_1 − y_2); at distance 1, w = ½, giving
// (−11, 0) for the first point (worked by hand from the gradient formula of
// van der Maaten & Hinton 2008, eq. 5, with the attractive term times ρ).
func ExampleGradient() {
	p := core.CSR{N: 2, Offsets: []int64{0, 1, 2}, Cols: []int32{1, 0}, Vals: []float32{0.5, 0.5}}
	y := []float64{0, 0, 1, 0}
	params := gradient.DefaultParams(2)
	grad := make([]float64, 4)
	kl, _ := gradient.Gradient(p, y, params, 1, grad)
	fmt.Printf("KL %.3f, gradient %.3f\n", kl, grad)
	gradient.Gradient(p, y, params, 12, grad)
	fmt.Printf("exaggerated gradient %.3f\n", grad)
	// Output:
	// KL 0.000, gradient [0.000 0.000 0.000 0.000]
	// exaggerated gradient [-11.000 0.000 11.000 0.000]
}

// A map of two rings of 20 rows each; the optimiser pulls each ring together
// and KL falls.
func ExampleOptimizer() {
	const m = 20
	n := 2 * m
	// Build P: row i joined to its two ring neighbours, all weights equal.
	off := []int64{0}
	var cols []int32
	for i := 0; i < n; i++ {
		base, a := (i/m)*m, i%m
		nb := []int{base + (a+m-1)%m, base + (a+1)%m}
		if nb[0] > nb[1] {
			nb[0], nb[1] = nb[1], nb[0]
		}
		for _, j := range nb {
			cols = append(cols, int32(j))
		}
		off = append(off, int64(len(cols)))
	}
	vals := make([]float32, len(cols))
	for k := range vals {
		vals[k] = 1 / float32(len(cols))
	}
	p := core.CSR{N: n, Offsets: off, Cols: cols, Vals: vals}

	y0 := make([]float64, 2*n)
	for i := range n { // a deterministic spiral as the start
		y0[2*i], y0[2*i+1] = math.Cos(float64(i)), math.Sin(float64(i))*float64(i)/float64(n)
	}
	gradient.InitScale(y0, 2, 1e-4)

	params := gradient.DefaultParams(n)
	params.EarlyIterations, params.Iterations = 50, 200
	opt, err := gradient.New(p, y0, params)
	if err != nil {
		fmt.Println(err)
		return
	}
	opt.Step()
	start := opt.KL()
	for !opt.Done() {
		if err := opt.Step(); err != nil {
			fmt.Println(err)
			return
		}
	}
	fmt.Println("method:", opt.Method(), "learning rate:", opt.LearningRate())
	fmt.Println("KL fell:", opt.KL() < start)
	// Output:
	// method: exact learning rate: 200
	// KL fell: true
}

func ExampleParseMethod() {
	for _, s := range []string{"tree", "Exact", "octree"} {
		m, err := gradient.ParseMethod(s)
		fmt.Println(m, err)
	}
	// Output:
	// tree <nil>
	// exact <nil>
	// auto unknown repulsion method "octree": want auto, exact, tree or grid
}

// InitScale rescales a PCA start so its first column has standard deviation
// 1e-4 (Kobak & Berens 2019).
func ExampleInitScale() {
	y := []float64{-1, 10, 0, 0, 1, -10} // 3 rows × 2 columns
	gradient.InitScale(y, 2, 1e-4)
	fmt.Printf("%.1e\n", y)
	// Output:
	// [-1.0e-04 1.0e-03 0.0e+00 0.0e+00 1.0e-04 -1.0e-03]
}
