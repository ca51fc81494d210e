package main

import (
	"errors"

	"nightjar/checkpoint"
	"nightjar/ingest"
	"nightjar/knn"
)

// isBadInput tells whether err is the user's to fix (exit 2) rather than an
// internal failure (exit 1).
func isBadInput(err error) bool {
	var (
		use   *usageError
		in    *ingest.InputError
		perp  *knn.PerplexityError
		bad   *checkpoint.CorruptError
		ver   *checkpoint.VersionError
		kind  *checkpoint.KindError
		magic *checkpoint.MagicError
		big   *knn.TooLargeError
		zero  *knn.ZeroRowError
	)
	return errors.As(err, &use) || errors.As(err, &in) || errors.As(err, &perp) ||
		errors.As(err, &bad) || errors.As(err, &ver) || errors.As(err, &kind) || errors.As(err, &magic) ||
		errors.As(err, &big) || errors.As(err, &zero)
}
