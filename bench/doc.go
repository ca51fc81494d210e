// Package bench holds nightjar's benchmark data, the reports of sweeps of
// settings, and the prediction of a run on a whole table from runs on
// subsamples of it. A run does not need it: the quality scores of a map are
// in nightjar/internal/score and its pictures in nightjar/internal/figure.
//
// # Data
//
// The built-in synthetic survey of the demo (Demo) and the MNIST digits read
// from IDX files (MNIST, ReadIDX, MNISTDir).
//
// # Fair sweeps
//
// A sweep runs each setting several times, in rounds that run every setting
// once (RunOrder: A B C A B C …, or each round shuffled from a seed), after
// untimed warm-up runs, so that a slow spell of a shared machine, or the cold
// caches of the first run, fall on all settings alike. Summarise reports each
// setting's median and its fastest and slowest run (WriteCSV, WriteMarkdown;
// WriteRunsCSV keeps every run). LoadAverage and BusyCPU read the machine's
// load around the runs (/proc/loadavg, /proc/stat; proc(5)) and LoadNotes
// says when it was busy or changed.
//
// KL divergences compare only between runs that share the input affinities
// P: a KL divergence measures the fit of the map to P, so two settings with
// different perplexity, neighbours, metric or rows measure different
// targets. Summarise gives settings with the same P (Result.PKey) the same
// letter and shows KL only where a letter is shared (or every setting shares
// one P); trustworthiness, continuity and label accuracy, which every
// setting shares, carry the other comparisons.
//
// # Predicting a run on the whole table
//
// A phase of a run whose cost grows with the rows N follows a law
//
//	t(N) = a + b·g(N),  a, b ≥ 0,
//
// with a the fixed part and g the growth its method implies (Law):
//
//   - g = N for reading the table, the affinities (N rows of k neighbours,
//     van der Maaten 2014, JMLR 15), the recall check and the scores (a fixed
//     sample of rows, each against all N: a run of fewer rows than the
//     sample scores every row and grows as N², so PhaseLaw.From leaves such
//     runs out of the scores' fit), writing the outputs, and the
//     FFT-interpolated optimiser: N points per iteration plus the grid, whose
//     size follows the map's width, not N (Linderman et al. 2019, Nature
//     Methods 16), so it sits in a;
//   - g = N·ln N for NN-descent (empirically about N^1.14, Dong, Charikar &
//     Li 2011, WWW), HNSW (N searches of a log N graph, Malkov & Yashunin
//     2018) and the Barnes–Hut optimiser (N tree walks of depth log N, van
//     der Maaten 2014);
//   - g = N² for the exact neighbour search and exact repulsion.
//
// FitLaw finds a and b by weighted least squares, each sample weighted by
// 1/σ² with σ = Abs + Rel·t (Noise: about 10 % between repeated runs on a
// shared machine, common practice; Rel rises to the spread of repeats at the
// same size when there are any, and each time sample adds the share of the
// machine's cores other processes kept busy during its run, Sample.Rel, our
// rough model of interference), constrained to a, b ≥ 0 (the constrained
// optimum of two unknowns lies on a bound when the free one does not, so
// trying each bound suffices). χ²/dof of the residuals says whether the
// samples follow the law; Fit.Exponent, the least-squares slope of ln t
// against ln N, says how fast they grow, whatever the law.
//
// Predict checks the law on every sample and extrapolates it from the two
// largest sizes (where terms that level off at small N, such as a grid
// that grows with the map's width or the garbage collector's slack, bend
// the curve least); it refuses, saying why, when the
// samples span fewer than three sizes (two parameters leave nothing to test
// the law with), when the full N is more than 200 times the largest sample,
// when χ²/dof exceeds 9 (residuals three times the noise), or when the
// samples grow faster than the law allows or fall as N grows. Its range is
// the prediction ± 2σ, σ² being the variance of a + b·g(N) from the
// covariance of the fit (scaled by χ²/dof when above 1; the standard
// propagation of a linear least-squares fit), plus the squared gap between
// the fits of all samples and of the two largest sizes over 2² (the range
// reaches the former), plus the noise of one run.
//
// ForecastRun sums the phases' predictions into a wall time, with what the
// phases do not account for (process start, files written between phases)
// as one more a + b·N phase. The fits' uncertainties are independent and add
// in quadrature; the noise of one run comes from the machine and is shared
// by all phases, so it adds linearly. Peak memory is fitted with a + b·N:
// the process's baseline plus arrays of a fixed size per row. NN-descent
// stops once its estimated recall reaches a goal, so larger tables can need
// more passes than the subsamples did: PredictPasses predicts them from the
// recalls the runs estimated (the model is in its doc), and the passes'
// phase is the time of one pass times their number. A search whose start
// grows on a large table (more random projection trees while the start's
// recall is low) is predicted the same way: PredictPasses also counts the
// trees (TreeGrowth), and the start's phase is the time of the base trees
// times their share.
//
// RoughSeconds makes the quick, unchecked estimate that keeps a ladder of
// subsamples within a time budget.
package bench
