package checkpoint

import (
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

func validManifest() *Manifest {
	t0 := time.Date(2026, 12, 1, 21, 0, 0, 0, time.UTC)
	return &Manifest{
		Tool: "nightjar", Version: "0.1.0", FormatVersion: ManifestVersion,
		Input:  Fingerprint{Path: "/data/cells.parquet", Size: 1234, ModTime: t0, ValuesHash: "ab12"},
		Params: json.RawMessage(`{"perplexity":30,"seed":7}`),
		Phase:  PhaseOptimising, Iteration: 250, Iterations: 1000, KL: 3.25,
		Status: StatusRunning, Started: t0, Updated: t0.Add(time.Hour), Elapsed: 3600.5,
		Files: map[string]string{"graph": "graph.njs"},
	}
}

func TestManifestRoundTrip(t *testing.T) {
	m := validManifest()
	b, err := marshalManifest(m)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), ManifestName)
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	got, err := ReadManifest(path)
	if err != nil {
		t.Fatal(err)
	}
	b2, err := marshalManifest(got)
	if err != nil {
		t.Fatal(err)
	}
	if string(b) != string(b2) {
		t.Errorf("round trip changed the manifest:\n%s\n%s", b, b2)
	}
	if !got.Started.Equal(m.Started) || got.Iteration != 250 || got.Files["graph"] != "graph.njs" {
		t.Errorf("got %+v", got)
	}
}

func TestManifestRefuses(t *testing.T) {
	tests := []struct {
		name   string
		edit   func(m map[string]any)
		raw    string
		want   string
		typeOK func(error) bool
	}{
		{name: "unknown phase", edit: func(m map[string]any) { m["phase"] = "sleeping" }, want: `unknown phase "sleeping"`},
		{name: "unknown status", edit: func(m map[string]any) { m["status"] = "ok" }, want: `unknown status "ok"`},
		{name: "negative iteration", edit: func(m map[string]any) { m["iteration"] = -1 }, want: "negative"},
		{name: "iteration beyond plan", edit: func(m map[string]any) { m["iteration"] = 1001 }, want: "beyond"},
		{name: "negative elapsed", edit: func(m map[string]any) { m["elapsed_seconds"] = -3 }, want: "elapsed"},
		{name: "finished phase, running status", edit: func(m map[string]any) { m["phase"] = "finished" }, want: "does not agree"},
		{name: "failed status, optimising phase", edit: func(m map[string]any) { m["status"] = "failed" }, want: "does not agree"},
		{name: "no tool", edit: func(m map[string]any) { m["tool"] = "" }, want: "tool is empty"},
		{name: "unknown field", edit: func(m map[string]any) { m["colour"] = "blue" }, want: "unknown field"},
		{name: "file escapes", edit: func(m map[string]any) { m["files"] = map[string]string{"graph": "../x"} }, want: "plain name"},
		{name: "absolute file", edit: func(m map[string]any) { m["files"] = map[string]string{"graph": "/etc/x"} }, want: "plain name"},
		{name: "iteration as string", edit: func(m map[string]any) { m["iteration"] = "250" }, want: "cannot unmarshal"},
		{name: "newer format", edit: func(m map[string]any) { m["format_version"] = 3 }, want: "format version 3",
			typeOK: func(e error) bool { var v *VersionError; return errors.As(e, &v) && v.File != "" }},
		{name: "trailing data", raw: "TRAIL", want: "after the JSON"},
		{name: "not JSON", raw: "REPLACE", want: "manifest"},
	}
	for _, tc := range tests {
		b, _ := marshalManifest(validManifest())
		var obj map[string]any
		if err := json.Unmarshal(b, &obj); err != nil {
			t.Fatal(err)
		}
		if tc.edit != nil {
			tc.edit(obj)
		}
		b, _ = json.Marshal(obj)
		switch tc.raw {
		case "TRAIL":
			b = append(b, []byte(` {}`)...)
		case "REPLACE":
			b = []byte("phase: optimising\n")
		}
		path := filepath.Join(t.TempDir(), ManifestName)
		if err := os.WriteFile(path, b, 0o644); err != nil {
			t.Fatal(err)
		}
		_, err := ReadManifest(path)
		if err == nil {
			t.Errorf("%s: accepted", tc.name)
			continue
		}
		if !strings.Contains(err.Error(), tc.want) || !strings.Contains(err.Error(), path) {
			t.Errorf("%s: error %q should name the file and contain %q", tc.name, err, tc.want)
		}
		if tc.typeOK != nil && !tc.typeOK(err) {
			t.Errorf("%s: error type %T", tc.name, err)
		}
	}
}

// TestManifestChecksum: a version-2 manifest edited into other valid JSON
// fails its checksum; a version-1 manifest (no checksum) is still read.
func TestManifestChecksum(t *testing.T) {
	b, err := marshalManifest(validManifest())
	if err != nil {
		t.Fatal(err)
	}
	if _, err := ParseManifest(b); err != nil {
		t.Fatalf("valid manifest: %v", err)
	}
	edited := strings.Replace(string(b), `"iteration": 250`, `"iteration": 251`, 1)
	if edited == string(b) {
		t.Fatal("the edit did not apply")
	}
	var ce *ChecksumError
	if _, err := ParseManifest([]byte(edited)); !errors.As(err, &ce) {
		t.Errorf("edited manifest: %v, want a checksum error", err)
	}
	var obj map[string]any
	if err := json.Unmarshal(b, &obj); err != nil {
		t.Fatal(err)
	}
	obj["format_version"] = 1
	delete(obj, "checksum")
	delete(obj, "run_id")
	v1, _ := json.Marshal(obj)
	m, err := ParseManifest(v1)
	if err != nil || m.FormatVersion != 1 {
		t.Errorf("version-1 manifest: %v", err)
	}
}

func TestFingerprintFile(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "table.csv")
	if err := os.WriteFile(path, []byte("a,b\n1,2\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	mt := time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC)
	if err := os.Chtimes(path, mt, mt); err != nil {
		t.Fatal(err)
	}
	t.Chdir(dir)
	f, err := FingerprintFile("table.csv")
	if err != nil {
		t.Fatal(err)
	}
	if !filepath.IsAbs(f.Path) || filepath.Base(f.Path) != "table.csv" || f.Size != 8 || !f.ModTime.Equal(mt) || f.ValuesHash != "" {
		t.Errorf("got %+v", f)
	}
	if _, err := FingerprintFile(dir); err == nil {
		t.Error("a directory was fingerprinted")
	}
	if _, err := FingerprintFile("missing.csv"); err == nil {
		t.Error("a missing file was fingerprinted")
	}
}

func TestFingerprintSame(t *testing.T) {
	t0 := time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC)
	base := Fingerprint{Path: "/d/t.parquet", Size: 100, ModTime: t0}
	hashed := base
	hashed.ValuesHash = "h1"
	tests := []struct {
		name     string
		a, b     Fingerprint
		same     bool
		reasonIn string
	}{
		{"identical", base, base, true, ""},
		{"same instant, other zone", base, Fingerprint{Path: base.Path, Size: 100, ModTime: t0.In(time.FixedZone("X", 3600))}, true, ""},
		{"size", base, Fingerprint{Path: base.Path, Size: 101, ModTime: t0}, false, "size changed from 100 to 101"},
		{"mtime", base, Fingerprint{Path: base.Path, Size: 100, ModTime: t0.Add(time.Second)}, false, "modification time changed"},
		{"path", base, Fingerprint{Path: "/e/t.parquet", Size: 100, ModTime: t0}, false, "path changed"},
		{"hash differs", hashed, Fingerprint{Path: base.Path, Size: 100, ModTime: t0, ValuesHash: "h2"}, false, "values changed"},
		{"hash same, file moved", hashed, Fingerprint{Path: "/e/t.parquet", Size: 100, ModTime: t0, ValuesHash: "h1"}, true, "same values; path changed"},
		{"one hash missing, touched", hashed, Fingerprint{Path: base.Path, Size: 100, ModTime: t0.Add(time.Second)}, false, "modification time"},
	}
	for _, tc := range tests {
		same, reason := tc.a.Same(tc.b)
		if same != tc.same || (tc.reasonIn == "" && reason != "") || !strings.Contains(reason, tc.reasonIn) {
			t.Errorf("%s: Same = %v, %q; want %v, containing %q", tc.name, same, reason, tc.same, tc.reasonIn)
		}
	}
}
