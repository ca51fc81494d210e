package gradient

import (
	"fmt"
	"math"
	"strings"
)

// Method selects how the repulsive forces are computed.
type Method int

const (
	// Auto picks Exact for N ≤ AutoExactLimit, otherwise Grid for 2-D maps
	// with Dof = 1 and N ≥ AutoGridMin, otherwise Tree.
	Auto Method = iota
	// Exact sums all pairs: O(N²), refused above ExactLimit rows.
	Exact
	// Tree is Barnes–Hut with a quadtree (2-D) or octree (3-D).
	Tree
	// Grid is FFT-accelerated interpolation onto an equispaced grid
	// (2-D maps with Dof = 1 only).
	Grid
)

// ExactLimit is the largest N the Exact method accepts.
const ExactLimit = 10000

// AutoExactLimit is the largest N for which Auto picks Exact.
const AutoExactLimit = 1000

// AutoGridMin is the smallest N for which Auto picks Grid (2-D, Dof = 1).
// Measured (BenchmarkRepulsion, one thread, maps of extent ∝ √N, medians):
// N = 5,000 tree 11 ms, grid 20 ms; 20,000 tree 69 ms, grid 35 ms; 100,000
// tree 308 ms, grid 167 ms; 1,000,000 tree 4.4 s, grid 2.0 s.
const AutoGridMin = 20000

// String returns the name ParseMethod accepts.
func (m Method) String() string {
	switch m {
	case Auto:
		return "auto"
	case Exact:
		return "exact"
	case Tree:
		return "tree"
	case Grid:
		return "grid"
	}
	return fmt.Sprintf("Method(%d)", int(m))
}

// ParseMethod parses "auto", "exact", "tree" or "grid" (case-insensitive).
func ParseMethod(s string) (Method, error) {
	switch strings.ToLower(strings.TrimSpace(s)) {
	case "auto":
		return Auto, nil
	case "exact":
		return Exact, nil
	case "tree":
		return Tree, nil
	case "grid":
		return Grid, nil
	}
	return Auto, fmt.Errorf("unknown repulsion method %q: want auto, exact, tree or grid", s)
}

// Params are the settings of the objective and the optimiser.
type Params struct {
	Dims int     // map dimensions: 2 or 3
	Dof  float64 // degrees of freedom α of the kernel, (0, 1e6]; 1 = Cauchy
	// Theta is the Barnes–Hut opening angle, [0, 2]; 0 = exact sums. A cell
	// is one body when size < θ·distance, size being the cell diagonal in 2-D
	// and the cell side in 3-D (equal accuracy at θ = 0.5; see bhSizeFactor).
	Theta           float64
	Exaggeration    float64 // early exaggeration ρ, (0, 1e4]
	EarlyIterations int     // iterations with exaggeration and early momentum, [0, Iterations]
	// MainExaggeration multiplies the attractive term after the early
	// phase, [0, 1e4]; 0 means 1 (plain t-SNE). Values above 1 pull
	// clusters tighter and keep more of the global layout on very large N
	// (Kobak & Berens 2019, Nat. Commun. 10:5416).
	MainExaggeration float64
	Iterations       int // total iterations including the early phase, ≥ 1
	// LearningRate η in the units of a gradient WITHOUT the constant 4, the
	// convention in which 200 is the classic value; the optimiser applies
	// η/4 to the gradient it computes (which keeps the 4). 0 = automatic:
	// η = max(N/ρ, 200), see AutoLearningRate.
	LearningRate  float64
	MomentumEarly float64 // momentum during the early phase, [0, 1)
	MomentumLate  float64 // momentum afterwards, [0, 1)
	MinGain       float64 // lower bound of the delta-bar-delta gains, (0, 1]
	Method        Method  // repulsion method
	// Threads is the number of goroutines the computation may use; values
	// below 1 mean 1. The package never looks at the number of CPUs: the
	// caller chooses (runtime.GOMAXPROCS(0) uses them all). Results do not
	// depend on it, to the bit.
	Threads int
	// Grid settings (Method Grid only); 0 = the defaults DefaultGridMin,
	// DefaultGridOrder, DefaultGridSpacing. Accuracy is governed by the node
	// spacing and the order (see TestGridAccuracy); the cost of the FFTs
	// grows like (map width / spacing)².
	GridMin     int     // minimum number of nodes per axis, [0, 4096]
	GridOrder   int     // interpolation nodes per axis around each point, [0, 8]
	GridSpacing float64 // largest node spacing in map units, [0, 10]
}

// AutoLearningRate is the automatic learning rate for n rows and early
// exaggeration rho, in the units of Params.LearningRate (gradient without the
// constant 4): max(n/rho, 200). The rule n/ρ is from Belkina et al. 2019 and
// Kobak & Berens 2019 (N/12 with ρ = 12); the floor is the classic fixed
// learning rate 200 (common practice). See the package documentation.
func AutoLearningRate(n int, rho float64) float64 {
	return math.Max(float64(n)/rho, 200)
}

// DefaultParams returns the published defaults for n rows: 2-D, α = 1
// (van der Maaten & Hinton 2008), θ = 0.5, ρ = 12 for 250 of 1000
// iterations, momentum 0.5 then 0.8, minimum gain 0.01 (van der Maaten 2014),
// learning rate AutoLearningRate(n, 12), method Auto, and one thread: callers
// set Threads to the number of goroutines they grant (the result does not
// depend on it).
func DefaultParams(n int) Params {
	return Params{
		Dims:            2,
		Dof:             1,
		Theta:           0.5,
		Exaggeration:    12,
		EarlyIterations: 250,
		Iterations:      1000,
		LearningRate:    AutoLearningRate(n, 12),
		MomentumEarly:   0.5,
		MomentumLate:    0.8,
		MinGain:         0.01,
		Method:          Auto,
		Threads:         1,
	}
}

// Validate checks p for a problem with n rows. Each error names the parameter
// and its allowed range. Threads is not checked: any value below 1 means 1.
func (p Params) Validate(n int) error {
	bad := func(name string, v any, want string) error {
		return fmt.Errorf("gradient parameter %s = %v: want %s", name, v, want)
	}
	finite := func(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }
	switch {
	case n < 2:
		return fmt.Errorf("gradient: %d rows, need at least 2", n)
	case p.Dims != 2 && p.Dims != 3:
		return bad("Dims", p.Dims, "2 or 3")
	case !(p.Dof > 0 && p.Dof <= 1e6):
		return bad("Dof", p.Dof, "a number in (0, 1e6]")
	case !(p.Theta >= 0 && p.Theta <= 2):
		return bad("Theta", p.Theta, "a number in [0, 2]")
	case !(p.Exaggeration > 0 && p.Exaggeration <= 1e4):
		return bad("Exaggeration", p.Exaggeration, "a number in (0, 1e4]")
	case p.Iterations < 1:
		return bad("Iterations", p.Iterations, "at least 1")
	case !(p.MainExaggeration >= 0 && p.MainExaggeration <= 1e4):
		return bad("MainExaggeration", p.MainExaggeration, "0 (meaning 1) or a number in (0, 1e4]")
	case p.EarlyIterations < 0 || p.EarlyIterations > p.Iterations:
		return bad("EarlyIterations", p.EarlyIterations, fmt.Sprintf("an integer in [0, Iterations=%d]", p.Iterations))
	case !(p.LearningRate >= 0) || !finite(p.LearningRate):
		return bad("LearningRate", p.LearningRate, "0 (automatic) or a finite positive number")
	case !(p.MomentumEarly >= 0 && p.MomentumEarly < 1):
		return bad("MomentumEarly", p.MomentumEarly, "a number in [0, 1)")
	case !(p.MomentumLate >= 0 && p.MomentumLate < 1):
		return bad("MomentumLate", p.MomentumLate, "a number in [0, 1)")
	case !(p.MinGain > 0 && p.MinGain <= 1):
		return bad("MinGain", p.MinGain, "a number in (0, 1]")
	case p.GridMin < 0 || p.GridMin > 4096:
		return bad("GridMin", p.GridMin, "0 (default) or an integer in [1, 4096]")
	case p.GridOrder < 0 || p.GridOrder > 8:
		return bad("GridOrder", p.GridOrder, "0 (default) or an integer in [1, 8]")
	case !(p.GridSpacing >= 0 && p.GridSpacing <= 10):
		return bad("GridSpacing", p.GridSpacing, "0 (default) or a number in (0, 10]")
	}
	switch p.Method {
	case Auto, Tree:
	case Exact:
		if n > ExactLimit {
			return bad("Method", "exact", fmt.Sprintf("auto or tree for %d rows (exact allows at most %d)", n, ExactLimit))
		}
	case Grid:
		if p.Dims != 2 || p.Dof != 1 {
			return bad("Method", "grid", fmt.Sprintf("auto, exact or tree for Dims=%d Dof=%v (grid needs Dims 2 and Dof 1)", p.Dims, p.Dof))
		}
	default:
		return bad("Method", int(p.Method), "auto, exact, tree or grid")
	}
	return nil
}

// Resolve returns the concrete method used for n rows: Method itself unless
// it is Auto (see Auto for the rule).
func (p Params) Resolve(n int) Method {
	if p.Method != Auto {
		return p.Method
	}
	switch {
	case n <= AutoExactLimit:
		return Exact
	case p.Dims == 2 && p.Dof == 1 && n >= AutoGridMin:
		return Grid
	}
	return Tree
}

// EffectiveLearningRate returns LearningRate, or AutoLearningRate(n,
// Exaggeration) when it is 0; units as Params.LearningRate.
func (p Params) EffectiveLearningRate(n int) float64 {
	if p.LearningRate > 0 {
		return p.LearningRate
	}
	return AutoLearningRate(n, p.Exaggeration)
}

// threads returns Threads, or 1 when it is below 1.
func (p Params) threads() int { return max(1, p.Threads) }
