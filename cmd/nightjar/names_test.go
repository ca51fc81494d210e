package main

import (
	"bytes"
	"context"

	"nightjar"
)

// The run directory's file names, as the tests look for them.
const (
	fileEmbedding = nightjar.FileEmbedding
	fileMap       = nightjar.FileMap
	fileReport    = nightjar.FileReport
	fileGraph     = "neighbours.njg"
	fileP         = "affinities.njp"
)

// runCLI runs the command in-process and returns exit code, stdout and stderr.
func runCLI(args ...string) (int, string, string) {
	var out, errb bytes.Buffer
	code := run(context.Background(), args, &out, &errb, nil)
	return code, out.String(), errb.String()
}
