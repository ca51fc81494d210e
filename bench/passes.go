package bench

import (
	"fmt"
	"math"
)

// PassRun is what one run of an iterative neighbour refinement (NN-descent)
// reported: its rows, the recall estimated before the first pass and
// after the first.
type PassRun struct {
	N       float64
	Before  float64 // estimated recall before the first pass
	After1  float64 // after the first pass (NaN when no pass ran)
	Samples int     // neighbour slots the estimate counted (probe rows × k)
	Trees   int     // trees of the start (0: TreeGrowth.Base)
}

// TreeGrowth is how the search grows its start: Base trees, then Step more
// at a time while the start's recall is below Goal, up to Max. Factor is
// what Step more trees multiply the start's misses by: measured on the
// 1,000,000-row demo survey (2026-12-03), 8 → 12 → 16 trees took the misses
// from 0.367 to 0.234 to 0.155 (factors 0.64 and 0.66); on 100,000 rows
// 0.49 and 0.57. The larger is the one to predict with: it predicts more
// trees, not fewer. A zero TreeGrowth means a fixed start.
type TreeGrowth struct {
	Base, Step, Max int
	Goal, Factor    float64
}

// DefaultTreeFactor is TreeGrowth.Factor as measured (see TreeGrowth).
const DefaultTreeFactor = 0.66

// PassForecast is the predicted number of refinement passes of a run at
// N rows: Passes for the prediction, High for the top of its range.
type PassForecast struct {
	Passes, High int
	// Trees and TreesHigh are the predicted trees of the start and the top
	// of their range (0 with a fixed start).
	Trees, TreesHigh int
	// Before and After1 are the extrapolated recalls before and after the
	// first pass at N; Shrink the factor a pass multiplies the misses by.
	Before, After1, Shrink float64
	Note                   string
}

// PredictPasses predicts how many passes a refinement that stops once its
// estimated recall reaches goal (or after maxPasses) runs on n rows, from
// runs on fewer rows. The model is ours, fitted to what the runs show
// (measured on the demo survey: 0.96, 0.90 and 0.82 before the first pass
// at 10⁴, 3·10⁴ and 10⁵ rows, 0.63 at 10⁶):
//
//   - the misses before the first pass, m₀ = 1 − recall, grow linearly in
//     log₁₀ N (least squares over the runs, capped at 1);
//   - each pass multiplies the misses by a factor c that grows as a power
//     of N (least squares of ln c against ln N; c = m₁/m₀, with m₁ floored
//     at half a miss of the estimate, 1/(2·Samples), where a pass left no
//     miss to count; capped at 1);
//   - after j passes the misses are m₀·c^j; the run stops at the first j ≥
//     1 with 1 − m₀·c^j ≥ goal.
//
// High is one pass more than Passes (at most maxPasses) when the recall
// after the predicted passes is within a factor 2 of the goal's misses,
// where the estimate could fall on either side of the goal.
//
// With a growing start (tg.Step > 0), each run's misses before the first
// pass are brought back to tg.Base trees (divided by tg.Factor per Step
// trees it had beyond them) before the fit; at n, Step trees are added
// while the start's predicted recall is below tg.Goal, each multiplying the
// misses by tg.Factor, and the passes are counted from there. TreesHigh is
// one Step more when the start grew.
func PredictPasses(runs []PassRun, n, goal float64, maxPasses int, tg TreeGrowth) PassForecast {
	pf := PassForecast{Passes: 1, High: 1}
	grows := tg.Step > 0 && tg.Base > 0 && tg.Factor > 0 && tg.Factor < 1
	var ns, m0s, lnN, lnC []float64
	for _, r := range runs {
		if math.IsNaN(r.Before) || math.IsNaN(r.After1) || r.Samples <= 0 {
			continue
		}
		m0 := math.Max(1-r.Before, 0.5/float64(r.Samples))
		m1 := math.Max(1-r.After1, 0.5/float64(r.Samples))
		base := m0
		if grows && r.Trees > tg.Base {
			base = math.Min(1, m0/math.Pow(tg.Factor, float64(r.Trees-tg.Base)/float64(tg.Step)))
		}
		ns, m0s = append(ns, r.N), append(m0s, base)
		lnN, lnC = append(lnN, math.Log(r.N)), append(lnC, math.Log(math.Min(1, m1/m0)))
	}
	if len(ns) < 2 || goal >= 1 {
		pf.Passes, pf.High = maxPasses, maxPasses
		pf.Note = "the number of refinement passes could not be predicted (fewer than two runs with a recall estimate, or a goal of 1): assumed the most"
		return pf
	}
	slope := Trend(ns, m0s)
	var last, lastN float64
	for i := range ns {
		if ns[i] >= lastN {
			last, lastN = m0s[i], ns[i]
		}
	}
	m0 := math.Min(1, math.Max(last+slope*math.Log10(n/lastN), 0))
	if grows {
		pf.Trees = tg.Base
		for 1-m0 < tg.Goal && pf.Trees < tg.Max {
			pf.Trees = min(pf.Trees+tg.Step, tg.Max)
			m0 *= tg.Factor
		}
		pf.TreesHigh = pf.Trees
		if pf.Trees > tg.Base {
			pf.TreesHigh = min(pf.Trees+tg.Step, tg.Max)
		}
	}
	c := math.Min(1, math.Exp(lineAt(lnN, lnC, math.Log(n))))
	pf.Before, pf.Shrink, pf.After1 = 1-m0, c, 1-m0*c
	miss, passes := m0, 0
	for passes < maxPasses {
		passes++
		miss *= c
		if 1-miss >= goal {
			break
		}
	}
	pf.Passes, pf.High = passes, passes
	if miss > (1-goal)/2 && passes < maxPasses {
		pf.High = passes + 1
	}
	start := ""
	if pf.Trees > 0 {
		start = fmt.Sprintf("a start of %d trees, ", pf.Trees)
	}
	word := "passes"
	if passes == 1 {
		word = "pass"
	}
	pf.Note = fmt.Sprintf("NN-descent at %s rows: %s%d %s predicted (estimated recall %.3f before the first, %.4f after %d)", grouped(n), start, passes, word, pf.Before, 1-miss, passes)
	return pf
}

// lineAt fits y = α + β·x by least squares and returns it at x0 (the mean
// of y when all x are equal).
func lineAt(x, y []float64, x0 float64) float64 {
	var mx, my float64
	for i := range x {
		mx, my = mx+x[i], my+y[i]
	}
	mx, my = mx/float64(len(x)), my/float64(len(x))
	var sxx, sxy float64
	for i := range x {
		sxx += sq(x[i] - mx)
		sxy += (x[i] - mx) * (y[i] - my)
	}
	if sxx == 0 {
		return my
	}
	return my + sxy/sxx*(x0-mx)
}
