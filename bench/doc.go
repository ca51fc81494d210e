// Package bench holds nightjar's benchmark data and reports: the built-in
// synthetic survey of the demo (Demo), the MNIST digits read from IDX files
// (MNIST, ReadIDX, MNISTDir), and the reports of sweeps of settings (WriteCSV,
// WriteMarkdown). A run does not need it: the quality scores of a map are in
// nightjar/internal/score and its pictures in nightjar/internal/figure.
package bench
