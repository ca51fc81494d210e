package gradient

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// placeFixture returns an invented reference map of n points in dims
// dimensions (three clusters), and for m new points k neighbours each with
// probabilities summing to 1 and a start near their neighbours.
func placeFixture(n, m, k, dims int, seed uint64) (ref, y []float64, nb []int32, p []float64) {
	rng := rand.New(rand.NewPCG(seed, 4))
	ref = make([]float64, n*dims)
	for i := range n {
		for c := range dims {
			ref[i*dims+c] = float64(10*(i%3)*(c%2)) + 3*rng.NormFloat64()
		}
	}
	y = make([]float64, m*dims)
	nb = make([]int32, m*k)
	p = make([]float64, m*k)
	for i := range m {
		var sum float64
		for j := range k {
			nb[i*k+j] = int32(rng.IntN(n))
			p[i*k+j] = rng.Float64() + 0.01
			sum += p[i*k+j]
		}
		for j := range k {
			p[i*k+j] /= sum
		}
		first := int(nb[i*k])
		for c := range dims {
			y[i*dims+c] = ref[first*dims+c] + rng.NormFloat64()
		}
	}
	return ref, y, nb, p
}

func placeParams(dims int, dof float64, method Method) PlaceParams {
	return PlaceParams{Dims: dims, Dof: dof, Method: method, Theta: 0.5, Steps: 50, LearningRate: 1,
		Momentum: 0.5, Exaggeration: 1, Threads: 1}
}

// TestPlaceGradientFiniteDifferences checks the gradient of a point's own
// cost C_i against central finite differences of C_i (the reference: the
// definition of the derivative), with the exact repulsion sums.
func TestPlaceGradientFiniteDifferences(t *testing.T) {
	for _, tc := range []struct {
		dims int
		dof  float64
	}{{2, 1}, {3, 1}, {2, 0.5}, {2, 3}} {
		ref, y, nb, p := placeFixture(300, 20, 15, tc.dims, 7)
		f, err := NewField(ref, placeParams(tc.dims, tc.dof, Exact))
		if err != nil {
			t.Fatal(err)
		}
		d := tc.dims
		for i := range 20 {
			q := slices.Clone(y[i*d : (i+1)*d])
			nbi, pi := nb[i*15:(i+1)*15], p[i*15:(i+1)*15]
			grad := make([]float64, d)
			f.PointGradient(q, nbi, pi, 1, grad)
			for c := range d {
				const h = 1e-5
				qp, qm := slices.Clone(q), slices.Clone(q)
				qp[c] += h
				qm[c] -= h
				fd := (f.PointCost(qp, nbi, pi) - f.PointCost(qm, nbi, pi)) / (2 * h)
				if math.Abs(fd-grad[c]) > 1e-6*math.Max(1, math.Abs(fd)) {
					t.Errorf("dims %d, dof %g, point %d, axis %d: gradient %.9g, finite difference %.9g", d, tc.dof, i, c, grad[c], fd)
				}
			}
		}
	}
}

// TestFieldAgainstExact compares the tree and grid fields with the exact
// sums over every reference point (the O(N) definition).
func TestFieldAgainstExact(t *testing.T) {
	for _, tc := range []struct {
		dims   int
		method Method
		theta  float64
		tol    float64
	}{
		{2, Tree, 0, 1e-10}, {3, Tree, 0, 1e-10},
		{2, Tree, 0.5, 2e-2}, {3, Tree, 0.5, 2e-2}, {2, Grid, 0.5, 1e-2},
	} {
		ref, y, _, _ := placeFixture(5000, 200, 1, tc.dims, 11)
		pr := placeParams(tc.dims, 1, tc.method)
		pr.Theta = tc.theta
		approx, err := NewField(ref, pr)
		if err != nil {
			t.Fatal(err)
		}
		exact, err := NewField(ref, placeParams(tc.dims, 1, Exact))
		if err != nil {
			t.Fatal(err)
		}
		d := tc.dims
		fa, fe := make([]float64, 200*d), make([]float64, 200*d)
		za, ze := make([]float64, 200), make([]float64, 200)
		for i := range 200 {
			q := y[i*d : (i+1)*d]
			za[i], ze[i] = approx.At(q, fa[i*d:(i+1)*d]), exact.At(q, fe[i*d:(i+1)*d])
		}
		worstZ, worstF := relErr(za, ze), relErr(fa, fe)
		t.Logf("%d-D %v θ=%g: relative error Z %.2e, F %.2e", d, tc.method, tc.theta, worstZ, worstF)
		if worstZ > tc.tol || worstF > tc.tol {
			t.Errorf("%d-D %v θ=%g: relative error Z %.2e, F %.2e above %.0e", d, tc.method, tc.theta, worstZ, worstF, tc.tol)
		}
	}
}

// TestPlaceIndependentOfBatchAndThreads: a point's result is the same bits
// whether it is placed alone, with others, or on several threads.
func TestPlaceIndependentOfBatchAndThreads(t *testing.T) {
	for _, method := range []Method{Exact, Tree, Grid} {
		ref, y, nb, p := placeFixture(3000, 700, 10, 2, 5)
		pr := placeParams(2, 1, method)
		pr.Gains, pr.Exaggeration, pr.ExaggerationSteps = true, 4, 10
		f1, _ := NewField(ref, pr)
		pr.Threads = 3
		f3, _ := NewField(ref, pr)
		all1, all3 := slices.Clone(y), slices.Clone(y)
		if err := f1.Place(all1, nb, p, 10, nil, nil); err != nil {
			t.Fatal(err)
		}
		if err := f3.Place(all3, nb, p, 10, nil, nil); err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(all1, all3) {
			t.Errorf("%v: 1 and 3 threads differ", method)
		}
		// Point 600 alone.
		one := slices.Clone(y[1200:1202])
		if err := f1.Place(one, nb[6000:6010], p[6000:6010], 10, nil, nil); err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(one, all1[1200:1202]) {
			t.Errorf("%v: point placed alone %v, with the others %v", method, one, all1[1200:1202])
		}
	}
}

// TestPlaceLowersCost: the steps lower each point's own cost, measured with
// the exact sums.
func TestPlaceLowersCost(t *testing.T) {
	ref, y, nb, p := placeFixture(2000, 300, 20, 2, 9)
	pr := placeParams(2, 1, Exact)
	f, _ := NewField(ref, pr)
	c0, c1 := make([]float64, 300), make([]float64, 300)
	if err := f.Place(y, nb, p, 20, c0, c1); err != nil {
		t.Fatal(err)
	}
	lower := 0
	for i := range c0 {
		if c1[i] < c0[i] {
			lower++
		}
	}
	if lower < 295 {
		t.Errorf("cost lower after the steps for %d of 300 points", lower)
	}
}

func TestPlaceRefusesBadInput(t *testing.T) {
	ref, y, nb, p := placeFixture(100, 5, 3, 2, 1)
	f, err := NewField(ref, placeParams(2, 1, Tree))
	if err != nil {
		t.Fatal(err)
	}
	bad := slices.Clone(nb)
	bad[0] = 100
	if err := f.Place(slices.Clone(y), bad, p, 3, nil, nil); err == nil {
		t.Error("a neighbour outside the reference was accepted")
	}
	if err := f.Place(slices.Clone(y), nb, p[:14], 3, nil, nil); err == nil {
		t.Error("mismatched sizes were accepted")
	}
	if _, err := NewField(ref[:3], placeParams(2, 1, Tree)); err == nil {
		t.Error("a reference of 3 values in 2-D was accepted")
	}
	if _, err := NewField(append(slices.Clone(ref), 0, 0, 0), placeParams(3, 1, Grid)); err == nil {
		t.Error("a 3-D grid was accepted")
	}
}
