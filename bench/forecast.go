package bench

import (
	"fmt"
	"math"
)

// PhaseLaw names a phase of a run and the law its time follows.
type PhaseLaw struct {
	Name string
	Law  Law
	// Times, when above 0, multiplies the phase's predicted value: the
	// samples are then the time of one repetition (one pass of a
	// refinement) and Times the repetitions predicted for the full run;
	// TimesHigh (≥ Times) multiplies the top of the range.
	Times, TimesHigh float64
	// From, when above 0, leaves the runs on fewer rows out of this
	// phase's fit: their work is of another kind (a run of fewer rows than
	// the scores' sample scores all its rows, so its scoring time grows as
	// N², not N). Runs at two sizes then suffice, their law unchecked.
	From int
}

// OtherPhase is the name Forecast gives the time a run spends outside the
// phases it was told about: the wall time minus their sum (process start,
// files written between phases, the start map). It follows a + b·N.
const OtherPhase = "other"

// RunSample is one measured run at N rows.
type RunSample struct {
	N       int
	Seconds float64            // wall time
	Phases  map[string]float64 // seconds by phase name; a missing phase took 0
	Memory  float64            // peak resident memory, bytes
	// Busy is the share of the machine's cores that other processes kept
	// busy during the run (0 to 1): its times are that much less certain
	// (Sample.Rel), its memory not.
	Busy float64
	// Repeats holds, for a phase whose value is the time of one
	// repetition (PhaseLaw.Times), how many the run made; missing means 1.
	Repeats map[string]float64
}

func (r RunSample) repeats(phase string) float64 {
	if v, ok := r.Repeats[phase]; ok {
		return v
	}
	return 1
}

// PhaseEstimate is the prediction of one phase's seconds.
type PhaseEstimate struct {
	Name string
	Law  Law
	Estimate
}

// Forecast is the prediction of a whole run at Rows rows: its wall time,
// the sum of its phases', and its peak memory. Seconds.Refused (or
// Memory.Refused) says why one was not predicted.
type Forecast struct {
	Rows    int
	Seconds Estimate
	Memory  Estimate
	Phases  []PhaseEstimate // in the order of the laws, then OtherPhase; phases that took 0 s in every run are left out
}

// ForecastRun predicts the wall time and peak memory of a run at n rows
// from runs of the same settings on fewer rows.
//
// Each phase's seconds are fitted with its law (Predict, TimeNoise, each
// run's times also as uncertain as its Busy share), the rest of the wall
// time as OtherPhase, and the peak memory with a + b·N (MemoryNoise). The predicted wall time is the sum of the phases'. Its
// range combines the phases' errors as the package doc says: the
// uncertainties of the fitted laws are independent and add in quadrature,
// while the noise of one run (the machine's load) is shared by all phases
// and adds linearly. The bottom of either range is at least the least
// wall time or memory of a run on the largest subsample (floors). One
// refused phase refuses the wall time, naming the phase.
func ForecastRun(laws []PhaseLaw, runs []RunSample, n int, lim Limits) Forecast {
	fc := Forecast{Rows: n}
	all := append(append([]PhaseLaw{}, laws...), PhaseLaw{Name: OtherPhase, Law: Linear})
	var total, fitVar, noiseSD, extra float64
	var refused string
	for _, pl := range all {
		var ss []Sample
		used := false
		for _, r := range runs {
			if r.N < pl.From {
				continue
			}
			v := r.Phases[pl.Name]
			if pl.Name == OtherPhase {
				v = r.Seconds
				for _, q := range laws {
					v -= r.Phases[q.Name] * r.repeats(q.Name)
				}
				v = math.Max(v, 0)
			}
			ss = append(ss, Sample{N: float64(r.N), Value: v, Rel: r.Busy})
			used = used || v != 0
		}
		if !used {
			continue // a phase these runs do not have
		}
		plim := lim
		if pl.From > 0 {
			// Fewer sizes reach From: two of them extend the law, unchecked.
			plim.MinSizes = min(lim.MinSizes, 2)
		}
		e := Predict(pl.Law, ss, float64(n), TimeNoise, plim)
		times, high := 1.0, 1.0
		if pl.Times > 0 {
			times, high = pl.Times, math.Max(pl.Times, pl.TimesHigh)
		}
		scaled := e
		scaled.Value, scaled.Low, scaled.High = times*e.Value, times*e.Low, high*e.High
		fc.Phases = append(fc.Phases, PhaseEstimate{Name: pl.Name, Law: pl.Law, Estimate: scaled})
		if e.Refused != "" {
			if refused == "" {
				refused = pl.Name + ": " + e.Refused
			}
			continue
		}
		total += scaled.Value
		// The top of the range takes the extra repetitions whole.
		fitVar += times * times * e.fitVar()
		noiseSD += times * e.noiseSD()
		extra += (high - times) * e.Value
	}
	fc.Seconds = Estimate{N: float64(n), Value: math.NaN(), Low: math.NaN(), High: math.NaN(), Refused: refused}
	secFloor, memFloor := floors(runs, n)
	if refused == "" {
		half := lim.Z * math.Sqrt(fitVar+noiseSD*noiseSD)
		fc.Seconds.Value, fc.Seconds.Low, fc.Seconds.High = total, math.Max(secFloor, total-half), total+half+extra
	}
	var ms []Sample
	for _, r := range runs {
		ms = append(ms, Sample{N: float64(r.N), Value: r.Memory})
	}
	fc.Memory = Predict(Linear, ms, float64(n), MemoryNoise, lim)
	if fc.Memory.Refused == "" {
		fc.Memory.Low = math.Max(fc.Memory.Low, memFloor)
	}
	return fc
}

// floors returns the least wall time and peak memory of the runs on the
// largest subsample of at most n rows: a run on n rows, whose every law
// grows with the rows, takes at least that much, which bounds the bottom
// of a range that the fits and the noise would let reach 0.
func floors(runs []RunSample, n int) (seconds, memory float64) {
	largest := 0
	for _, r := range runs {
		switch {
		case r.N > n:
		case r.N > largest:
			largest, seconds, memory = r.N, r.Seconds, r.Memory
		case r.N == largest:
			seconds, memory = math.Min(seconds, r.Seconds), math.Min(memory, r.Memory)
		}
	}
	return seconds, memory
}

// fitVar is the variance of the prediction from the fits, and noiseSD the
// noise of one run at the predicted size (as Predict combined them).
func (e Estimate) fitVar() float64 { return e.varFit }

func (e Estimate) noiseSD() float64 { return e.noise }

// String is a one-line account of an estimate, for messages and tests.
func (e Estimate) String() string {
	if e.Refused != "" {
		return "refused: " + e.Refused
	}
	return fmt.Sprintf("%.4g (%.4g–%.4g) by %s", e.Value, e.Low, e.High, e.Fit.Law)
}

// RoughSeconds estimates the wall time of a run at n rows from runs on
// fewer, to budget the next runs of a ladder: with runs at one size, each
// phase's mean scaled by its law's g(n)/g(N) (an upper bound for a phase
// with a fixed cost); with more sizes, each phase's fitted law at n,
// unchecked. It returns NaN without runs.
func RoughSeconds(laws []PhaseLaw, runs []RunSample, n int) float64 {
	if len(runs) == 0 {
		return math.NaN()
	}
	all := append(append([]PhaseLaw{}, laws...), PhaseLaw{Name: OtherPhase, Law: Linear})
	var total float64
	for _, pl := range all {
		var ss []Sample
		var sum float64
		for _, r := range runs {
			v := r.Phases[pl.Name] * r.repeats(pl.Name)
			if pl.Name == OtherPhase {
				v = r.Seconds
				for _, q := range laws {
					v -= r.Phases[q.Name] * r.repeats(q.Name)
				}
				v = math.Max(v, 0)
			}
			ss = append(ss, Sample{N: float64(r.N), Value: v})
			sum += v
		}
		if f, err := FitLaw(pl.Law, ss, TimeNoise); err == nil {
			total += f.At(float64(n))
			continue
		}
		total += sum / float64(len(ss)) * pl.Law.g(float64(n)) / pl.Law.g(float64(runs[0].N))
	}
	return total
}
