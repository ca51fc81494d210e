// Command gencorpus writes the seed corpus of the checkpoint fuzz targets
// into ../fuzz (run from the checkpoint folder: go run ./testdata/gencorpus).
// The seeds are invented demo data: valid files, truncated and bit-flipped
// copies, and headers with hostile counts.
package main

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"log"
	"os"
	"path/filepath"

	"nightjar/checkpoint"
)

func write(target, name string, data []byte) {
	dir := filepath.Join("testdata", "fuzz", target)
	if err := os.MkdirAll(dir, 0o755); err != nil {
		log.Fatal(err)
	}
	body := fmt.Sprintf("go test fuzz v1\n[]byte(%q)\n", data)
	if err := os.WriteFile(filepath.Join(dir, name), []byte(body), 0o644); err != nil {
		log.Fatal(err)
	}
}

// seed writes a state-file seed for both decoders' targets: FuzzDecode
// (bytes in memory) and FuzzReadFile (the same bytes read from a file).
func seed(name string, data []byte) {
	write("FuzzDecode", name, data)
	write("FuzzReadFile", name, data)
}

func encode(kind string, secs []checkpoint.Section) []byte {
	var b bytes.Buffer
	if err := checkpoint.Encode(&b, kind, secs); err != nil {
		log.Fatal(err)
	}
	return b.Bytes()
}

func main() {
	state := encode("state", []checkpoint.Section{
		{Name: "embedding", Data: checkpoint.EncodeValues([]float64{1, -2, 3.5, 4})},
		{Name: "empty"},
		{Name: "gains", Data: checkpoint.EncodeValues([]float64{1, 0.8})},
		{Name: "rng", Data: checkpoint.EncodeValues([]uint64{42})},
	})
	seed("valid-state", state)
	seed("valid-empty", encode("state", nil))
	seed("valid-graph", encode("graph", []checkpoint.Section{
		{Name: "indices", Data: checkpoint.EncodeValues([]int32{1, 0})},
	}))
	for _, n := range []int{0, 5, 12, 20, 40, len(state) / 2, len(state) - 1} {
		seed(fmt.Sprintf("truncated-%03d", n), state[:n])
	}
	for _, i := range []int{3, 9, 14, 30, 60, len(state) - 3} {
		b := bytes.Clone(state)
		b[i] ^= 0x04
		seed(fmt.Sprintf("flipped-%03d", i), b)
	}
	newer := bytes.Clone(state)
	binary.LittleEndian.PutUint32(newer[8:], 2)
	seed("newer-version", newer)
	seed("other-file", []byte("PAR1\x15\x04\x15\x10"))
	trailing := append(bytes.Clone(state), 0, 0)
	seed("trailing", trailing)

	manifest := `{
  "tool": "nightjar",
  "version": "0.1.0",
  "format_version": 1,
  "input": {"path": "/data/cells.parquet", "size": 1234, "mod_time": "2026-12-01T21:00:00Z", "values_hash": "ab12"},
  "params": {"perplexity": 30, "seed": 7},
  "phase": "optimising",
  "iteration": 250,
  "iterations": 1000,
  "kl": 3.25,
  "status": "interrupted",
  "started": "2026-12-01T21:00:00Z",
  "updated": "2026-12-01T22:00:00+01:00",
  "elapsed_seconds": 3600.5,
  "files": {"graph": "graph.njs", "affinities": "affinities.njs"}
}
`
	write("FuzzManifest", "valid", []byte(manifest))
	write("FuzzManifest", "minimal", []byte(`{"tool":"nightjar","version":"","format_version":1,"input":{"path":"","size":0,"mod_time":"0001-01-01T00:00:00Z"},"phase":"created","iteration":0,"iterations":0,"kl":0,"status":"running","started":"0001-01-01T00:00:00Z","updated":"0001-01-01T00:00:00Z","elapsed_seconds":0}`))
	write("FuzzManifest", "truncated", []byte(manifest[:len(manifest)/2]))
	write("FuzzManifest", "bad-phase", bytes.Replace([]byte(manifest), []byte(`"optimising"`), []byte(`"optimizing"`), 1))
	write("FuzzManifest", "negative", bytes.Replace([]byte(manifest), []byte(`"iteration": 250`), []byte(`"iteration": -250`), 1))
	write("FuzzManifest", "unknown-field", bytes.Replace([]byte(manifest), []byte(`"kl"`), []byte(`"kld"`), 1))
	write("FuzzManifest", "escape", bytes.Replace([]byte(manifest), []byte(`"graph.njs"`), []byte(`"../../etc/passwd"`), 1))
	write("FuzzManifest", "newer", bytes.Replace([]byte(manifest), []byte(`"format_version": 1`), []byte(`"format_version": 2`), 1))
}
