// Package nightjar makes a t-SNE map of a large numeric feature table — a
// million single-cell profiles, document or image embeddings — on a
// CPU-only machine, resumably, and says how good the map is.
//
// A run lives in a run directory. Embed creates one and runs its phases:
//
//  1. read the table (Parquet, Arrow IPC or CSV, chunk by chunk; package
//     ingest), optionally projected onto its first principal components;
//  2. find each row's k = min(N−1, ⌊3·perplexity⌋) nearest neighbours,
//     exactly or approximately (package knn);
//  3. calibrate the affinities P by perplexity and symmetrise them
//     (package knn; van der Maaten & Hinton, JMLR 9, 2008);
//  4. minimise KL(P‖Q) by gradient descent with momentum, early
//     exaggeration and Barnes–Hut or FFT-grid repulsion, writing the
//     optimiser's state every few iterations (packages gradient and
//     checkpoint; van der Maaten, JMLR 15, 2014; Linderman et al., Nature
//     Methods 16, 2019);
//  5. write embedding.parquet (the map, rows in input order, with the id and
//     label columns), map.png and report.json (times, peak memory, and
//     quality scores: trustworthiness, continuity, neighbourhood
//     preservation, label accuracy and KL divergence).
//
// Resume continues a run that was stopped (a cancelled context, a killed
// process) from its newest checkpoint; it ends with the same bits as a run
// never interrupted, and the same seed gives the same bits for any number of
// threads. Status tells where a run stands, Score recomputes its scores.
//
// Settings is the one description of what shapes a map, and the schema of
// the manifest that a run directory keeps; DefaultSettings holds every
// default. Runtime holds what does not change the result (threads,
// checkpoint cadence). Progress goes to an Observer.
//
// Another Go module uses nightjar with a replace directive in its go.mod
// (require nightjar v0.0.0 and replace nightjar => ../path/to/nightjar) or
// with "go work use" of a clone of this repository.
//
// Caution: a t-SNE map keeps local neighbourhoods, not global geometry. The
// sizes of clusters and the distances between clusters carry little
// meaning; confirm any finding with the original data.
package nightjar
