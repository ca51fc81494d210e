package nightjar

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"reflect"
	"slices"
	"strings"
	"sync/atomic"
	"testing"
)

// blobs returns n rows of d features around three centres (invented data).
func blobs(n, d int, seed uint64) (Matrix, *Column) {
	rng := rand.New(rand.NewPCG(seed, 9))
	x := Matrix{N: n, D: d, Data: make([]float32, n*d)}
	lab := make([]string, n)
	for i := range n {
		g := i % 3
		lab[i] = string(rune('a' + g))
		for j := range d {
			x.Data[i*d+j] = float32(8*g*(j%2)) + float32(rng.NormFloat64())
		}
	}
	return x, &Column{Name: "group", Strings: lab}
}

// cancelAt cancels the context when the optimiser's progress reaches an
// iteration: an Observer that stops a run as a signal would.
type cancelAt struct {
	quietObserver
	phase  atomic.Value
	at     int64
	cancel context.CancelFunc
}

func (c *cancelAt) Phase(name string, _ int64) { c.phase.Store(name) }
func (c *cancelAt) Progress(done, _ int64) {
	if p, _ := c.phase.Load().(string); p == "optimising" && done >= c.at {
		c.cancel()
	}
}

// cancelOnNote cancels the context when the run notes a line that begins
// with prefix.
type cancelOnNote struct {
	quietObserver
	prefix string
	cancel context.CancelFunc
}

func (c *cancelOnNote) Note(text string) {
	if strings.HasPrefix(text, c.prefix) {
		c.cancel()
	}
}

// TestEmbedStopResumeSameBits stops an in-memory run through its context,
// as a signal would, and resumes it: in the optimiser, the run directory
// keeps what it needs (the saved table, the graph, P and a state); in the
// scores, which can take longer than a batch system waits after its stop
// signal, the run stops without them. Either way the resumed run ends with
// the map bits and the scores of an uninterrupted one.
func TestEmbedStopResumeSameBits(t *testing.T) {
	x, lab := blobs(400, 6, 3)
	s := DefaultSettings()
	s.Perplexity, s.Iterations, s.EarlyIterations = 15, 200, 50
	rt := DefaultRuntime()
	rt.CheckpointEvery, rt.ScoreSample = 40, 100
	dir := t.TempDir()
	whole, err := Embed(context.Background(), FromMatrix(x, nil, lab), filepath.Join(dir, "whole"), s, rt, nil)
	if err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name    string
		stopper func(context.CancelFunc) Observer
		check   func(stop *StoppedError, cut string) error
	}{
		{"optimiser", func(c context.CancelFunc) Observer { return &cancelAt{at: 90, cancel: c} },
			func(stop *StoppedError, _ string) error {
				if !stop.Saved || stop.Iteration < 90 || stop.Iteration >= s.Iterations {
					return fmt.Errorf("want a checkpoint past 90")
				}
				return nil
			}},
		{"scores", func(c context.CancelFunc) Observer { return &cancelOnNote{prefix: "scoring the map", cancel: c} },
			func(stop *StoppedError, cut string) error {
				if stop.Phase != PhaseOutputs || stop.Iteration != s.Iterations {
					return fmt.Errorf("want phase %q after %d iterations", PhaseOutputs, s.Iterations)
				}
				if _, err := os.Stat(filepath.Join(cut, FileReport)); err == nil {
					return fmt.Errorf("%s written by a run stopped before its scores", FileReport)
				}
				return nil
			}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			ctx, cancel := context.WithCancel(context.Background())
			defer cancel()
			cut := filepath.Join(dir, c.name)
			_, err := Embed(ctx, FromMatrix(x, nil, lab), cut, s, rt, c.stopper(cancel))
			var stop *StoppedError
			if !errors.As(err, &stop) {
				t.Fatalf("Embed after cancel: %v, want a StoppedError", err)
			}
			if err := c.check(stop, cut); err != nil {
				t.Fatalf("Embed after cancel: %+v: %v", stop, err)
			}
			st, err := Status(cut)
			if err != nil || st.Status != StatusInterrupted || st.ResumeCommand == "" {
				t.Fatalf("Status = %+v, %v; want interrupted with a resume command", st, err)
			}
			res, err := Resume(context.Background(), cut, rt, nil)
			if err != nil {
				t.Fatal(err)
			}
			if len(res.Map) != len(whole.Map) {
				t.Fatalf("resumed map has %d values, whole %d", len(res.Map), len(whole.Map))
			}
			for i := range res.Map {
				if math.Float64bits(res.Map[i]) != math.Float64bits(whole.Map[i]) {
					t.Fatalf("value %d: resumed %v, whole %v", i, res.Map[i], whole.Map[i])
				}
			}
			a, _ := os.ReadFile(whole.Embedding)
			b, _ := os.ReadFile(res.Embedding)
			if !bytes.Equal(a, b) {
				t.Error("embedding.parquet differs between the resumed and the whole run")
			}
			qa, qb := whole.Report.Quality, res.Report.Quality
			if qa == nil || qb == nil || qa.Trustworthiness != qb.Trustworthiness || qa.Continuity != qb.Continuity {
				t.Errorf("scores: whole %+v, resumed %+v; want the same", qa, qb)
			}
			again, err := Resume(context.Background(), cut, rt, nil)
			if err != nil || !again.AlreadyFinished {
				t.Errorf("Resume of a finished run: %+v, %v", again, err)
			}
		})
	}
}

// TestEmbedThreadsSameBits checks the promise of the par package end to
// end: 1 and 3 threads give the same map bits.
func TestEmbedThreadsSameBits(t *testing.T) {
	x, lab := blobs(600, 5, 4)
	s := DefaultSettings()
	s.Perplexity, s.Iterations, s.EarlyIterations, s.Repulsion = 20, 120, 30, "tree"
	var maps [2][]float64
	for i, th := range []int{1, 3} {
		rt := DefaultRuntime()
		rt.Threads, rt.ScoreSample = th, 0
		res, err := Embed(context.Background(), FromMatrix(x, nil, lab), filepath.Join(t.TempDir(), "run"), s, rt, nil)
		if err != nil {
			t.Fatal(err)
		}
		maps[i] = res.Map
	}
	for i := range maps[0] {
		if math.Float64bits(maps[0][i]) != math.Float64bits(maps[1][i]) {
			t.Fatalf("value %d: 1 thread %v, 3 threads %v", i, maps[0][i], maps[1][i])
		}
	}
}

func TestEmbedRefusals(t *testing.T) {
	x, _ := blobs(50, 4, 5)
	dir := t.TempDir()
	cases := []struct {
		name string
		src  Source
		edit func(*Settings, *Runtime)
		want string
	}{
		{"missing file", FromFile(filepath.Join(dir, "nope.parquet")), nil, "nope.parquet"},
		{"bad dims", FromMatrix(x, nil, nil), func(s *Settings, _ *Runtime) { s.Dims = 4 }, "--dims"},
		{"bad threads", FromMatrix(x, nil, nil), func(_ *Settings, r *Runtime) { r.Threads = 0 }, "--threads"},
		{"perplexity", FromMatrix(x, nil, nil), func(s *Settings, _ *Runtime) { s.Perplexity = 40 }, "perplexity"},
	}
	for i, c := range cases {
		s, rt := DefaultSettings(), DefaultRuntime()
		if c.edit != nil {
			c.edit(&s, &rt)
		}
		_, err := Embed(context.Background(), c.src, filepath.Join(dir, "run"+string(rune('a'+i))), s, rt, nil)
		if err == nil || !IsUserFault(err) || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: %v (user fault %v), want a user fault naming %q", c.name, err, IsUserFault(err), c.want)
		}
	}
}

func TestOptionsRoundTrip(t *testing.T) {
	s := DefaultSettings()
	for _, o := range SettingOptions() {
		v, err := s.Get(o.Name)
		if err != nil {
			t.Fatalf("Get(%q): %v", o.Name, err)
		}
		if o.Kind == "list" {
			continue
		}
		if err := s.Set(o.Name, v); err != nil {
			t.Errorf("Set(%q, %q): %v", o.Name, v, err)
		}
	}
	if s2 := DefaultSettings(); !equalSettings(s, s2) {
		t.Errorf("Get then Set changed the settings: %+v", s)
	}
	if err := s.Set("perplexity", "ten"); err == nil {
		t.Error("Set accepted a non-number")
	}
	if err := s.Set("features", "a,b"); err != nil || len(s.Features) != 2 {
		t.Errorf("list option: %v %v", err, s.Features)
	}
	var names []string
	for _, o := range RuntimeOptions() {
		names = append(names, o.Name)
	}
	for _, want := range []string{"threads", "checkpoint-every", "checkpoint-minutes", "score-sample"} {
		if !slices.Contains(names, want) {
			t.Errorf("RuntimeOptions %v lack %q", names, want)
		}
	}
}

func equalSettings(a, b Settings) bool { return reflect.DeepEqual(a, b) }
