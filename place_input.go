package nightjar

import (
	"errors"
	"fmt"
	"slices"
	"strings"

	"nightjar/ingest"
)

// readNewRows reads the table of new rows: the reference's feature columns
// by name (its selection unless s.Features says otherwise), in the
// reference's order, projected like the reference when it used --reduce.
// The id and label columns default to the reference's when the new table
// has them. A missing or extra feature column is an *InputError naming it.
func readNewRows(s *PlaceSettings, ref *reference, threads int, progress func(done, total int64)) (*ingest.Table, error) {
	opt := ingest.Options{Features: s.Features, ID: s.ID, Label: s.Label, SkipInvalid: s.SkipInvalid, Threads: threads, Progress: progress}
	if len(opt.Features) == 0 {
		opt.Features = ref.s.Features
	}
	// The reference's id and label columns, when the user named none and
	// the new table has them.
	defID, defLabel := s.ID == "" && ref.s.ID != "", s.Label == "" && ref.s.Label != ""
	if defID {
		opt.ID = ref.s.ID
	}
	if defLabel {
		opt.Label = ref.s.Label
	}
	var t *ingest.Table
	var err error
	for {
		t, err = ingest.Read(s.Input, opt)
		var in *ingest.InputError
		if err == nil || !errors.As(err, &in) || !strings.HasPrefix(in.Reason, "no such column") {
			break
		}
		switch {
		case defID && in.Column == opt.ID:
			opt.ID, defID = "", false
		case defLabel && in.Column == opt.Label:
			opt.Label, defLabel = "", false
		default:
			return nil, featureError(s.Input, ref, err)
		}
	}
	if err != nil {
		return nil, err
	}
	if t.ID != nil {
		s.ID = t.ID.Name
	}
	if t.Label != nil {
		s.Label = t.Label.Name
	}
	want := ref.feat.Names
	if ref.feat.PCA != nil {
		want = ref.feat.SourceNames
	}
	if err := matchFeatures(s.Input, t, want, ref); err != nil {
		return nil, err
	}
	if p := ref.feat.PCA; p != nil {
		if t.D != p.D {
			return nil, &ingest.InputError{File: s.Input, Reason: fmt.Sprintf("has %d feature columns, the reference's projection (--reduce) takes %d", t.D, p.D)}
		}
		scores := p.Project(t.Matrix, threads)
		x := Matrix{N: t.N, D: p.K, Data: make([]float32, len(scores))}
		for i, v := range scores {
			x.Data[i] = float32(v)
		}
		t.Matrix, t.Features = x, ref.feat.Names
	}
	return t, nil
}

// featureError turns a missing feature column into a message that says it
// is one of the reference's.
func featureError(file string, ref *reference, err error) error {
	var in *ingest.InputError
	if errors.As(err, &in) && in.Column != "" {
		return &ingest.InputError{File: file, Column: in.Column, Reason: "the reference's feature column is missing from the new table (" + in.Reason + ")"}
	}
	return err
}

// matchFeatures checks that the new table's features are the reference's
// (want; nil when the reference could not tell its names, then only their
// number is checked) and puts them in the reference's order.
func matchFeatures(file string, t *ingest.Table, want []string, ref *reference) error {
	if want == nil {
		d := ref.feat.X.D
		if ref.feat.PCA != nil {
			d = ref.feat.PCA.D
		}
		if t.D != d {
			return &ingest.InputError{File: file, Reason: fmt.Sprintf("has %d feature columns, the reference %d", t.D, d)}
		}
		return nil
	}
	for _, name := range want {
		if !slices.Contains(t.Features, name) {
			return &ingest.InputError{File: file, Column: name, Reason: fmt.Sprintf("the reference's feature column is missing from the new table (the reference has %d features, the new table %d)", len(want), t.D)}
		}
	}
	for _, name := range t.Features {
		if !slices.Contains(want, name) {
			return &ingest.InputError{File: file, Column: name, Reason: fmt.Sprintf("is a feature of the new table but not one of the reference's %d features: leave it out with --features, or name it with --id or --label", len(want))}
		}
	}
	if slices.Equal(t.Features, want) {
		return nil
	}
	at := make([]int, len(want)) // new column of each reference feature
	for j, name := range want {
		at[j] = slices.Index(t.Features, name)
	}
	row := make([]float32, t.D)
	for i := range t.N {
		r := t.Row(i)
		for j, c := range at {
			row[j] = r[c]
		}
		copy(r, row)
	}
	t.Features = slices.Clone(want)
	return nil
}
