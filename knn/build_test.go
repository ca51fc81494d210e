package knn

import (
	"slices"
	"strings"
	"testing"
)

func TestParseMethod(t *testing.T) {
	tests := []struct {
		in   string
		want Method
		ok   bool
	}{
		{"exact", ByExact, true},
		{"Descent", ByDescent, true},
		{" HNSW ", ByHNSW, true},
		{"auto", 0, false},
		{"", 0, false},
	}
	for _, tc := range tests {
		got, err := ParseMethod(tc.in)
		if (err == nil) != tc.ok || (tc.ok && got != tc.want) {
			t.Errorf("ParseMethod(%q) = %v, %v", tc.in, got, err)
		}
		if tc.ok && got.String() != strings.ToLower(strings.TrimSpace(tc.in)) {
			t.Errorf("%v.String() = %q", got, got.String())
		}
	}
	if s := Method(7).String(); s != "Method(7)" {
		t.Errorf("Method(7).String() = %q", s)
	}
}

// TestBuild: Build gives the bits of the method it dispatches to, run with
// that method's defaults and the caller's settings, and names its phases.
func TestBuild(t *testing.T) {
	x := axClustered(3000, 10, 8, 6)
	const k = 12
	for _, m := range []Metric{Euclidean, Cosine} {
		opt := BuildOptions{Options: Options{Threads: 2, Metric: m}, Seed: 9, RecallGoal: 0.995}
		phases := map[string]bool{}
		opt.Progress = func(phase string, done, total int64) { phases[phase] = true }

		ge, st, err := Build(x, k, ByExact, opt)
		if err != nil {
			t.Fatal(err)
		}
		we, err := Exact(x, k, ExactOptions{Options: opt.Options})
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(ge.Index, we.Index) || !slices.Equal(ge.Dist2, we.Dist2) || st.Passes != 0 {
			t.Errorf("%v: Build(ByExact) differs from Exact", m)
		}

		gd, st, err := Build(x, k, ByDescent, opt)
		if err != nil {
			t.Fatal(err)
		}
		do := DefaultDescent(k)
		do.Options, do.Seed, do.StopRecall = opt.Options, opt.Seed, opt.RecallGoal
		wd, _, err := Descent(x, k, do)
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(gd.Index, wd.Index) || !slices.Equal(gd.Dist2, wd.Dist2) {
			t.Errorf("%v: Build(ByDescent) differs from Descent", m)
		}
		if st.Passes < 1 || len(st.PassRecall) != st.Passes+1 || st.BuildSeconds != 0 {
			t.Errorf("%v: descent stats %+v", m, st)
		}

		if _, st, err = Build(x, k, ByHNSW, opt); err != nil {
			t.Fatal(err)
		}
		if st.Passes < 1 || st.TreeSeconds != 0 {
			t.Errorf("%v: HNSW stats %+v", m, st)
		}
		for _, p := range []string{"exact", "refine 1", "build", "query"} {
			if !phases[p] {
				t.Errorf("%v: no progress for phase %q (got %v)", m, p, phases)
			}
		}
	}
	if _, _, err := Build(x, k, Method(9), BuildOptions{}); err == nil {
		t.Error("Build accepted an unknown method")
	}
}
