package checkpoint

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"time"
)

// ManifestVersion is the manifest format version written by this build.
// Version 2 adds the run id, the runtime options and a checksum over the
// manifest itself; version 1 manifests (no checksum) are still read, and
// saved again as version 2. ReadManifest refuses other versions with a
// *VersionError.
const ManifestVersion = 2

// PrevManifestName is the copy of the manifest as it was before its last
// save: the run falls back on it when manifest.json is damaged or was
// changed outside nightjar.
const PrevManifestName = "manifest.prev.json"

// ManifestName is the file name of the manifest inside a run directory.
const ManifestName = "manifest.json"

// maxManifestSize bounds what ReadManifest reads: a manifest is a few
// kilobytes; anything near this is not one.
const maxManifestSize = 16 << 20

// Phases of a run, in order; PhaseFailed may follow any of them.
const (
	PhaseCreated    = "created"
	PhaseNeighbours = "neighbours"
	PhaseAffinities = "affinities"
	PhaseOptimising = "optimising"
	PhaseOutputs    = "outputs"
	PhaseFinished   = "finished"
	PhaseFailed     = "failed"
)

// Statuses of a run.
const (
	StatusRunning     = "running"
	StatusInterrupted = "interrupted"
	StatusFinished    = "finished"
	StatusFailed      = "failed"
)

var (
	phases   = []string{PhaseCreated, PhaseNeighbours, PhaseAffinities, PhaseOptimising, PhaseOutputs, PhaseFinished, PhaseFailed}
	statuses = []string{StatusRunning, StatusInterrupted, StatusFinished, StatusFailed}
)

// Fingerprint identifies the input table of a run so that a resume can refuse
// a changed input. ValuesHash is computed by the caller from the values read
// (any stable text, e.g. a hex digest); this package only compares it.
type Fingerprint struct {
	Path       string    `json:"path"`
	Size       int64     `json:"size"`
	ModTime    time.Time `json:"mod_time"`
	ValuesHash string    `json:"values_hash,omitempty"`
}

// FingerprintFile returns the absolute path, size and modification time of
// the file at path. ValuesHash is left empty.
func FingerprintFile(path string) (Fingerprint, error) {
	abs, err := filepath.Abs(path)
	if err != nil {
		return Fingerprint{}, fmt.Errorf("fingerprinting %s: %w", path, err)
	}
	fi, err := os.Stat(abs)
	if err != nil {
		return Fingerprint{}, fmt.Errorf("fingerprinting %s: %w", path, err)
	}
	if !fi.Mode().IsRegular() {
		return Fingerprint{}, fmt.Errorf("fingerprinting %s: not a regular file", path)
	}
	return Fingerprint{Path: abs, Size: fi.Size(), ModTime: fi.ModTime().UTC()}, nil
}

// Same reports whether f and g describe the same input, and a reason naming
// what differs. When both carry a ValuesHash, the hashes decide: equal hashes
// mean the same values even if the file moved or was touched, and then the
// reason, if not empty, notes the metadata change. Otherwise path, size and
// modification time must all match.
func (f Fingerprint) Same(g Fingerprint) (bool, string) {
	var meta []string
	if f.Path != g.Path {
		meta = append(meta, fmt.Sprintf("path changed from %s to %s", f.Path, g.Path))
	}
	if f.Size != g.Size {
		meta = append(meta, fmt.Sprintf("size changed from %d to %d bytes", f.Size, g.Size))
	}
	if !f.ModTime.Equal(g.ModTime) {
		meta = append(meta, fmt.Sprintf("modification time changed from %s to %s",
			f.ModTime.UTC().Format(time.RFC3339Nano), g.ModTime.UTC().Format(time.RFC3339Nano)))
	}
	if f.ValuesHash != "" && g.ValuesHash != "" {
		if f.ValuesHash != g.ValuesHash {
			return false, fmt.Sprintf("values changed (hash %s, now %s)", f.ValuesHash, g.ValuesHash)
		}
		if len(meta) > 0 {
			return true, "same values; " + strings.Join(meta, "; ")
		}
		return true, ""
	}
	if len(meta) > 0 {
		return false, strings.Join(meta, "; ")
	}
	return true, ""
}

// Manifest describes a run; it is stored as JSON in manifest.json.
type Manifest struct {
	Tool          string `json:"tool"`
	Version       string `json:"version"`
	FormatVersion int    `json:"format_version"`
	// RunID is made when the run is created and written into every file
	// the run saves (graph, affinities, states), which are refused when
	// loaded into another run. Empty for runs created by version-1 builds.
	RunID string      `json:"run_id,omitempty"`
	Input Fingerprint `json:"input"`
	// Params holds all parameters of the run, opaque to this package.
	Params     json.RawMessage `json:"params,omitempty"`
	Phase      string          `json:"phase"`
	Iteration  int             `json:"iteration"`
	Iterations int             `json:"iterations"`
	KL         float64         `json:"kl"`
	Status     string          `json:"status"`
	Started    time.Time       `json:"started"`
	Updated    time.Time       `json:"updated"`
	// Elapsed is the seconds of work so far, summed across resumes.
	Elapsed float64 `json:"elapsed_seconds"`
	// SecondsPerIteration is the optimiser's measured pace, for estimates
	// of the time left. Zero until measured.
	SecondsPerIteration float64 `json:"seconds_per_iteration,omitempty"`
	// Runtime holds the options given at creation that do not change the
	// result (checkpoint cadence), kept for resumes; opaque to this package.
	Runtime json.RawMessage `json:"runtime,omitempty"`
	// Checksum is the hex SHA-256 of the manifest's JSON with Checksum
	// empty (version 2): a manifest whose checksum fails was damaged or
	// changed outside nightjar and is never used.
	Checksum string `json:"checksum,omitempty"`
	// Files maps logical names ("graph", "embedding" …) to file names in
	// the run directory. Optional.
	Files map[string]string `json:"files,omitempty"`
}

// Validate checks the fields of m: tool named, format version equal to
// ManifestVersion (else a *VersionError), known phase and status that agree
// on being finished or failed, 0 ≤ Iteration ≤ Iterations, finite KL and
// Elapsed ≥ 0, Params valid JSON if present, and file names in Files that
// are plain names inside the run directory.
func (m *Manifest) Validate() error {
	if m.FormatVersion != ManifestVersion && m.FormatVersion != 1 {
		return &VersionError{Got: uint32(m.FormatVersion), Want: ManifestVersion}
	}
	if m.Tool == "" {
		return errors.New("manifest: tool is empty")
	}
	if !contains(phases, m.Phase) {
		return fmt.Errorf("manifest: unknown phase %q (want one of %s)", m.Phase, strings.Join(phases, ", "))
	}
	if !contains(statuses, m.Status) {
		return fmt.Errorf("manifest: unknown status %q (want one of %s)", m.Status, strings.Join(statuses, ", "))
	}
	if (m.Phase == PhaseFinished) != (m.Status == StatusFinished) {
		return fmt.Errorf("manifest: phase %q does not agree with status %q", m.Phase, m.Status)
	}
	if (m.Phase == PhaseFailed) != (m.Status == StatusFailed) {
		return fmt.Errorf("manifest: phase %q does not agree with status %q", m.Phase, m.Status)
	}
	if m.Iteration < 0 || m.Iterations < 0 {
		return fmt.Errorf("manifest: negative iteration count (iteration %d, iterations %d)", m.Iteration, m.Iterations)
	}
	if m.Iteration > m.Iterations {
		return fmt.Errorf("manifest: iteration %d beyond the %d planned", m.Iteration, m.Iterations)
	}
	if math.IsNaN(m.KL) || math.IsInf(m.KL, 0) {
		return fmt.Errorf("manifest: KL divergence %v is not finite", m.KL)
	}
	if !(m.Elapsed >= 0) || math.IsInf(m.Elapsed, 0) {
		return fmt.Errorf("manifest: elapsed seconds %v must be finite and non-negative", m.Elapsed)
	}
	if m.Input.Size < 0 {
		return fmt.Errorf("manifest: input size %d is negative", m.Input.Size)
	}
	if len(m.Params) > 0 && !json.Valid(m.Params) {
		return errors.New("manifest: params are not valid JSON")
	}
	if len(m.Runtime) > 0 && !json.Valid(m.Runtime) {
		return errors.New("manifest: runtime is not valid JSON")
	}
	for logical, name := range m.Files {
		if logical == "" {
			return errors.New("manifest: files has an empty logical name")
		}
		if !plainName(name) {
			return fmt.Errorf("manifest: file %q for %q must be a plain name inside the run directory", name, logical)
		}
	}
	return nil
}

// plainName reports whether name is a single path element naming a file
// inside a directory (no separators, not "." or "..").
func plainName(name string) bool {
	return name != "" && name != "." && name != ".." &&
		!strings.ContainsAny(name, `/\`+"\x00") && filepath.Base(name) == name
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

// ParseManifest decodes and validates a manifest from JSON. Unknown fields,
// trailing data and invalid fields are errors.
func ParseManifest(data []byte) (*Manifest, error) {
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	var m Manifest
	if err := dec.Decode(&m); err != nil {
		return nil, fmt.Errorf("manifest: %w", err)
	}
	if _, err := dec.Token(); err != io.EOF {
		return nil, errors.New("manifest: unexpected data after the JSON object")
	}
	if err := m.Validate(); err != nil {
		return nil, err
	}
	if m.FormatVersion >= 2 {
		want, err := manifestChecksum(&m)
		if err != nil {
			return nil, err
		}
		if m.Checksum != want {
			return nil, &ChecksumError{}
		}
	}
	return &m, nil
}

// ChecksumError reports a manifest whose checksum does not match its
// content: it was damaged, or changed outside nightjar.
type ChecksumError struct{ File string }

func (e *ChecksumError) Error() string {
	name := e.File
	if name == "" {
		name = "manifest"
	}
	return name + ": checksum does not match the content (damaged, or changed outside nightjar)"
}

// manifestChecksum returns the hex SHA-256 of m's JSON with Checksum empty.
func manifestChecksum(m *Manifest) (string, error) {
	c := *m
	c.Checksum = ""
	b, err := json.Marshal(&c)
	if err != nil {
		return "", err
	}
	sum := sha256.Sum256(b)
	return hex.EncodeToString(sum[:]), nil
}

// ReadManifest reads and validates the manifest at path (see ParseManifest).
// Errors name the file.
func ReadManifest(path string) (*Manifest, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("reading manifest: %w", err)
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, maxManifestSize+1))
	if err != nil {
		return nil, fmt.Errorf("reading manifest %s: %w", path, err)
	}
	if len(data) > maxManifestSize {
		return nil, fmt.Errorf("%s: larger than %d bytes, not a manifest", path, maxManifestSize)
	}
	m, err := ParseManifest(data)
	if err != nil {
		var ve *VersionError
		if errors.As(err, &ve) {
			ve.File = path
			return nil, err
		}
		var ce *ChecksumError
		if errors.As(err, &ce) {
			ce.File = path
			return nil, err
		}
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return m, nil
}

// marshalManifest returns the JSON written to manifest.json, as the
// current version with its checksum.
func marshalManifest(m *Manifest) ([]byte, error) {
	m.FormatVersion = ManifestVersion
	sum, err := manifestChecksum(m)
	if err != nil {
		return nil, err
	}
	m.Checksum = sum
	b, err := json.MarshalIndent(m, "", "  ")
	if err != nil {
		return nil, err
	}
	return append(b, '\n'), nil
}
