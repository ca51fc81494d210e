package checkpoint

import (
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
	FS       FS
	manifest *Manifest
}

// fsys returns the file system the run writes through.
func (r *Run) fsys() FS {
	if r.FS == nil {
		return OSFS{}
	}
	return r.FS
}

// Create makes dir (and its parents) and starts a run there, writing a first
// manifest with tool "nightjar", phase "created", status "running" and
// Started/Updated set to now. It refuses a directory that already holds a
// manifest.
func Create(dir string) (*Run, error) {
	return CreateFS(dir, nil)
}

// CreateFS is Create with the run writing through fsys (nil means OSFS),
// its first manifest included; the directory itself is made with os.MkdirAll.
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
	r := &Run{Dir: dir, FS: fsys}
	m := &Manifest{
		Tool:          "nightjar",
		FormatVersion: ManifestVersion,
		Phase:         PhaseCreated,
		Status:        StatusRunning,
		Started:       now,
		Updated:       now,
	}
	if err := r.SaveManifest(m); err != nil {
		return nil, err
	}
	return r, nil
}

// Open opens an existing run directory: it reads and validates its manifest
// and removes temporary files left by an interrupted write.
func Open(dir string) (*Run, error) {
	m, err := ReadManifest(filepath.Join(dir, ManifestName))
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return nil, fmt.Errorf("%s is not a run directory (no %s): %w", dir, ManifestName, err)
		}
		return nil, err
	}
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("opening run directory: %w", err)
	}
	for _, e := range entries {
		if e.Type().IsRegular() && isTempName(e.Name()) {
			if err := os.Remove(filepath.Join(dir, e.Name())); err != nil {
				return nil, fmt.Errorf("removing leftover temporary file: %w", err)
			}
		}
	}
	return &Run{Dir: dir, manifest: m}, nil
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
	if err := AtomicWriteFS(r.fsys(), r.Path(ManifestName), func(w io.Writer) error {
		_, err := w.Write(b)
		return err
	}); err != nil {
		return err
	}
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
	if err := writeFile(r.fsys(), r.Path(f), kind, sections); err != nil {
		return fmt.Errorf("saving %s: %w", name, err)
	}
	return nil
}

// LoadArtifact reads the artifact written by SaveArtifact(name, kind, …).
// A missing artifact gives an error satisfying errors.Is(err, fs.ErrNotExist);
// decoding errors are those of ReadFile.
func (r *Run) LoadArtifact(name, kind string) ([]Section, error) {
	f, err := artifactFile(name)
	if err != nil {
		return nil, err
	}
	return ReadFile(r.Path(f), kind)
}
