package checkpoint

import (
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"time"
)

// KindState is the kind of the optimiser state files written by SaveState.
const KindState = "state"

// iterationSection is the section SaveState adds to every state file so that
// LoadState can check the iteration in the file against its name.
const iterationSection = "checkpoint.iteration"

// statesKept is how many optimiser states SaveState keeps.
const statesKept = 2

// ErrNoState is returned by LoadState when the run directory holds no state
// file at all (the optimisation has not saved one yet).
var ErrNoState = errors.New("no optimiser state saved")

// Run is an open run directory. Its methods are not safe for concurrent use,
// and two processes must not work in the same directory at once.
type Run struct {
	// Dir is the run directory, as given to Create or Open.
	Dir string
	// FS is the file system the run writes through (manifest, states,
	// artifacts, and the removal of old states); nil means OSFS. Tests set it
	// to make a write fail or stop. Reads and Open's clean-up use the
	// operating system directly.
	FS FS
	// Fallback is set by Open when manifest.json could not be used and the
	// earlier copy was: it says why, for a warning.
	Fallback string
	manifest *Manifest
	last     []byte // the manifest's bytes as last written or read
}

// fsys returns the file system the run writes through.
func (r *Run) fsys() FS {
	if r.FS == nil {
		return OSFS{}
	}
	return r.FS
}

// Create makes dir (and its parents) and returns a new run there with its
// manifest in memory only: tool "nightjar", a new run id, phase "created",
// status "running", Started/Updated now. The caller completes the manifest
// (settings, input) and writes it with SaveManifest, so that the first
// manifest on disk is complete. Create refuses a directory that already
// holds a manifest. The caller should hold the directory's writer lock
// (AcquireLock) before anything is written.
func Create(dir string) (*Run, error) {
	return CreateFS(dir, nil)
}

// CreateFS is Create with the run writing through fsys (nil means OSFS);
// the directory itself is made with os.MkdirAll.
func CreateFS(dir string, fsys FS) (*Run, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("creating run directory: %w", err)
	}
	mp := filepath.Join(dir, ManifestName)
	if _, err := os.Lstat(mp); err == nil {
		return nil, fmt.Errorf("%s already holds a run (%s); resume it or choose another directory", dir, ManifestName)
	} else if !errors.Is(err, fs.ErrNotExist) {
		return nil, fmt.Errorf("creating run directory: %w", err)
	}
	now := time.Now().UTC()
	return &Run{Dir: dir, FS: fsys, manifest: &Manifest{
		Tool:          "nightjar",
		FormatVersion: ManifestVersion,
		RunID:         newRunID(),
		Phase:         PhaseCreated,
		Status:        StatusRunning,
		Started:       now,
		Updated:       now,
	}}, nil
}

// newRunID returns 16 random hex digits.
func newRunID() string {
	var b [8]byte
	if _, err := rand.Read(b[:]); err != nil {
		panic("checkpoint: no randomness for a run id: " + err.Error())
	}
	return hex.EncodeToString(b[:])
}

// Open opens an existing run directory: it reads and validates its
// manifest, and writes nothing. A manifest that fails its checksum or its
// validation is never used: Open then falls back on the copy saved before
// the last change (PrevManifestName) when that one is valid, and says so in
// Run.Fallback; otherwise it returns an error saying what to do.
func Open(dir string) (*Run, error) {
	path := filepath.Join(dir, ManifestName)
	m, raw, err := readManifestBytes(path)
	if err == nil {
		return &Run{Dir: dir, manifest: m, last: raw}, nil
	}
	if errors.Is(err, fs.ErrNotExist) {
		return nil, fmt.Errorf("%s is not a run directory (no %s): %w", dir, ManifestName, err)
	}
	prev, praw, perr := readManifestBytes(filepath.Join(dir, PrevManifestName))
	if perr != nil {
		return nil, fmt.Errorf("%w; no valid earlier copy (%s) to fall back on: restore %s from a backup, or start a new run in another directory", err, PrevManifestName, ManifestName)
	}
	return &Run{Dir: dir, manifest: prev, last: praw,
		Fallback: fmt.Sprintf("%v; using the copy saved before the last change (%s): the manifest was changed or damaged outside nightjar", err, PrevManifestName)}, nil
}

// readManifestBytes reads and parses a manifest, returning its bytes too.
func readManifestBytes(path string) (*Manifest, []byte, error) {
	m, err := ReadManifest(path)
	if err != nil {
		return nil, nil, err
	}
	raw, err := os.ReadFile(path)
	if err != nil {
		return nil, nil, fmt.Errorf("reading manifest: %w", err)
	}
	return m, raw, nil
}

// RemoveTemporaries removes the temporary files that an interrupted write
// left in the run directory. Only the holder of the writer lock may call
// it: another process's temporaries may be writes in progress.
func (r *Run) RemoveTemporaries() error {
	entries, err := os.ReadDir(r.Dir)
	if err != nil {
		return fmt.Errorf("listing %s: %w", r.Dir, err)
	}
	for _, e := range entries {
		if e.Type().IsRegular() && isTempName(e.Name()) {
			if err := os.Remove(filepath.Join(r.Dir, e.Name())); err != nil && !errors.Is(err, fs.ErrNotExist) {
				return fmt.Errorf("removing leftover temporary file: %w", err)
			}
		}
	}
	return nil
}

// Manifest returns the run's manifest as last saved or read. The caller may
// change it and pass it to SaveManifest.
func (r *Run) Manifest() *Manifest { return r.manifest }

// SaveManifest validates m and writes it atomically to manifest.json; m then
// becomes the run's manifest. The caller keeps Updated and Elapsed current.
func (r *Run) SaveManifest(m *Manifest) error {
	if err := m.Validate(); err != nil {
		return fmt.Errorf("saving manifest of %s: %w", r.Dir, err)
	}
	b, err := marshalManifest(m)
	if err != nil {
		return fmt.Errorf("saving manifest of %s: %w", r.Dir, err)
	}
	if r.last != nil {
		prev := r.last
		if err := AtomicWriteFS(r.fsys(), r.Path(PrevManifestName), func(w io.Writer) error {
			_, err := w.Write(prev)
			return err
		}); err != nil {
			return err
		}
	}
	if err := AtomicWriteFS(r.fsys(), r.Path(ManifestName), func(w io.Writer) error {
		_, err := w.Write(b)
		return err
	}); err != nil {
		return err
	}
	r.last = b
	r.manifest = m
	return nil
}

// Path returns the path of the file called name inside the run directory.
func (r *Run) Path(name string) string { return filepath.Join(r.Dir, name) }

// stateName returns the file name of the state at iteration it.
func stateName(it int) string { return fmt.Sprintf("state-%09d%s", it, Extension) }

// parseStateName returns the iteration of a state file name, or false.
func parseStateName(name string) (int, bool) {
	s, ok := strings.CutPrefix(name, "state-")
	if !ok {
		return 0, false
	}
	s, ok = strings.CutSuffix(s, Extension)
	if !ok || len(s) < 9 {
		return 0, false
	}
	for i := 0; i < len(s); i++ {
		if s[i] < '0' || s[i] > '9' {
			return 0, false
		}
	}
	it, err := strconv.Atoi(s)
	if err != nil || stateName(it) != name {
		return 0, false
	}
	return it, true
}

// states lists the iterations of the state files in the run directory,
// newest first.
func (r *Run) states() ([]int, error) {
	entries, err := os.ReadDir(r.Dir)
	if err != nil {
		return nil, fmt.Errorf("listing states: %w", err)
	}
	var its []int
	for _, e := range entries {
		if it, ok := parseStateName(e.Name()); ok && e.Type().IsRegular() {
			its = append(its, it)
		}
	}
	slices.Sort(its)
	slices.Reverse(its)
	return its, nil
}

// SaveState writes the optimiser state at the given iteration (≥ 0, below
// 10⁹) as state-NNNNNNNNN.njs of kind "state", atomically. Section names must
// not start with "checkpoint." (reserved). Once the new file is durable, it
// deletes state files of later iterations (left from before a resume at an
// earlier state) and all but the two newest states up to this iteration.
func (r *Run) SaveState(iteration int, sections []Section) error {
	if iteration < 0 || iteration >= 1e9 {
		return fmt.Errorf("saving state: iteration %d out of range [0, 1e9)", iteration)
	}
	all := make([]Section, 0, len(sections)+1)
	for _, s := range sections {
		if strings.HasPrefix(s.Name, "checkpoint.") {
			return fmt.Errorf("saving state: section name %q is reserved", s.Name)
		}
		all = append(all, s)
	}
	all = append(all, Section{Name: iterationSection, Data: EncodeValues([]int64{int64(iteration)})})
	all = r.withRunID(all)
	if err := writeFile(r.fsys(), r.Path(stateName(iteration)), KindState, all); err != nil {
		return fmt.Errorf("saving state at iteration %d: %w", iteration, err)
	}
	its, err := r.states()
	if err != nil {
		return err
	}
	kept := 0
	for _, it := range its {
		if it <= iteration && kept < statesKept {
			kept++
			continue
		}
		if err := r.fsys().Remove(r.Path(stateName(it))); err != nil && !errors.Is(err, fs.ErrNotExist) {
			return fmt.Errorf("removing old state: %w", err)
		}
	}
	return nil
}

// LoadState returns the newest valid optimiser state: its iteration and its
// sections (as given to SaveState). Each newer state that cannot be used
// (truncated, corrupt, unreadable) is skipped with a warning naming the file
// and, where one is at fault, the section; the warnings wrap the typed errors
// of ReadFile. With no state file at all it returns ErrNoState; when every
// state is unusable the error lists why.
func (r *Run) LoadState() (iteration int, sections []Section, warnings []error, err error) {
	its, err := r.states()
	if err != nil {
		return 0, nil, nil, err
	}
	if len(its) == 0 {
		return 0, nil, nil, fmt.Errorf("%s: %w", r.Dir, ErrNoState)
	}
	for _, it := range its {
		secs, err := r.loadState(it)
		if err == nil {
			return it, secs, warnings, nil
		}
		warnings = append(warnings, fmt.Errorf("skipping state of iteration %d: %w", it, err))
	}
	return 0, nil, warnings, fmt.Errorf("%s: no usable optimiser state: %w", r.Dir, lineJoin(warnings))
}

// lineJoin joins errors on one line, keeping each reachable by errors.Is/As.
type lineJoin []error

func (e lineJoin) Error() string {
	s := make([]string, len(e))
	for i, err := range e {
		s[i] = err.Error()
	}
	return strings.Join(s, "; ")
}

func (e lineJoin) Unwrap() []error { return e }

func (r *Run) loadState(it int) ([]Section, error) {
	path := r.Path(stateName(it))
	secs, err := ReadFile(path, KindState)
	if err != nil {
		return nil, err
	}
	b, err := Lookup(secs, iterationSection)
	if err != nil {
		return nil, &CorruptError{File: path, Section: iterationSection, Reason: "missing"}
	}
	v, err := DecodeValues[int64](b)
	if err != nil || len(v) != 1 || v[0] != int64(it) {
		return nil, &CorruptError{File: path, Section: iterationSection, Reason: "does not match the iteration in the file name"}
	}
	secs, err = r.checkRunID(path, secs)
	if err != nil {
		return nil, err
	}
	out := secs[:0:0]
	for _, s := range secs {
		if s.Name != iterationSection {
			out = append(out, s)
		}
	}
	return out, nil
}

// artifactFile returns the file name of an artifact: name plus ".njs".
func artifactFile(name string) (string, error) {
	if !plainName(name) || strings.HasPrefix(name, ".") || strings.HasPrefix(name, "state-") || name == ManifestName {
		return "", fmt.Errorf("artifact name %q: must be a plain file name, not hidden, not a state or manifest name", name)
	}
	return name + Extension, nil
}

// SaveArtifact atomically writes a state file of the given kind called
// name + ".njs" in the run directory (e.g. name "graph", kind "graph").
// name must be a plain, non-hidden file name not starting with "state-".
func (r *Run) SaveArtifact(name, kind string, sections []Section) error {
	f, err := artifactFile(name)
	if err != nil {
		return err
	}
	for _, sec := range sections {
		if strings.HasPrefix(sec.Name, "checkpoint.") {
			return fmt.Errorf("saving %s: section name %q is reserved", name, sec.Name)
		}
	}
	if err := writeFile(r.fsys(), r.Path(f), kind, r.withRunID(sections)); err != nil {
		return fmt.Errorf("saving %s: %w", name, err)
	}
	return nil
}

// runSection is the section holding the run id in every file a run saves.
const runSection = "checkpoint.run"

// withRunID appends the run id section when the run has an id.
func (r *Run) withRunID(sections []Section) []Section {
	if r.manifest == nil || r.manifest.RunID == "" {
		return sections
	}
	return append([]Section{{Name: runSection, Data: []byte(r.manifest.RunID)}}, sections...)
}

// ForeignError reports a file that another run saved: it is refused.
type ForeignError struct {
	File      string
	Want, Got string // run ids; Got is empty when the file has none
}

func (e *ForeignError) Error() string {
	if e.Got == "" {
		return fmt.Sprintf("%s carries no run id: it was not saved by this run (%s)", e.File, e.Want)
	}
	return fmt.Sprintf("%s belongs to another run (%s, this run is %s)", e.File, e.Got, e.Want)
}

// checkRunID refuses the sections of a file saved by another run, and
// returns them without the run id section.
func (r *Run) checkRunID(path string, sections []Section) ([]Section, error) {
	want := ""
	if r.manifest != nil {
		want = r.manifest.RunID
	}
	got, err := Lookup(sections, runSection)
	if want != "" && (err != nil || string(got) != want) {
		return nil, &ForeignError{File: path, Want: want, Got: string(got)}
	}
	out := sections[:0:0]
	for _, s := range sections {
		if s.Name != runSection {
			out = append(out, s)
		}
	}
	return out, nil
}

// LoadArtifact reads the artifact written by SaveArtifact(name, kind, …).
// A missing artifact gives an error satisfying errors.Is(err, fs.ErrNotExist);
// decoding errors are those of ReadFile.
func (r *Run) LoadArtifact(name, kind string) ([]Section, error) {
	f, err := artifactFile(name)
	if err != nil {
		return nil, err
	}
	secs, err := ReadFile(r.Path(f), kind)
	if err != nil {
		return nil, err
	}
	return r.checkRunID(r.Path(f), secs)
}
