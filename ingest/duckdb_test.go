package ingest

import (
	"math"
	"slices"
	"testing"
)

// TestDuckDBParquet reads testdata/buoys.parquet, written by DuckDB's Parquet writer
// (an independent implementation; see testdata/README.md and testdata/buoys.sql for the
// SQL that defines every cell). The expected values below restate that SQL.
func TestDuckDBParquet(t *testing.T) {
	const path = "testdata/buoys.parquet"
	got, err := Read(path, Options{ID: "station_id", Label: "site", BatchRows: 64})
	if err != nil {
		t.Fatal(err)
	}
	// serviced is BOOLEAN: not a feature.
	wantNames := []string{"water_temp", "humidity", "wind_dir_offset", "pressure", "salinity", "battery_bars", "uptime_min"}
	if !slices.Equal(got.Features, wantNames) || got.N != 300 || got.Format != "parquet" {
		t.Fatalf("got %d rows, features %v", got.N, got.Features)
	}
	sites := []string{"north_reef", "kelp_bank", "outer_shoal", "harbour_mouth"}
	for i := 0; i < got.N; i++ {
		want := []float64{
			float64(i%37)/4 - 3,            // water_temp DOUBLE
			float64(40 + (i*7)%55),         // humidity INTEGER
			float64((i*5)%30 - 10),         // wind_dir_offset SMALLINT
			1000 + float64((i*11)%50)/2,    // pressure FLOAT
			float64(3000+(i*13)%700) / 100, // salinity DECIMAL(6,2)
			float64(i % 9),                 // battery_bars UTINYINT
			float64(i * 3),                 // uptime_min UBIGINT
		}
		row := got.Row(i)
		for j, w := range want {
			tol := 0.0
			if j == 4 {
				tol = 1e-5 // a decimal's float32 rounding
			}
			if math.Abs(float64(row[j])-float64(float32(w))) > tol {
				t.Fatalf("row %d %s = %v, want %v", i+1, wantNames[j], row[j], w)
			}
		}
		if got.ID.Ints[i] != int64(1000+i) {
			t.Fatalf("row %d id = %d", i+1, got.ID.Ints[i])
		}
		if got.Label.Strings[i] != sites[i%4] {
			t.Fatalf("row %d label = %q, want %q", i+1, got.Label.Strings[i], sites[i%4])
		}
	}
	if got.Hash != fingerprint(got.D, got.Data) {
		t.Error("Hash does not match its definition")
	}
}

// TestDuckDBNulls: in testdata/buoys_null.parquet (DuckDB) station 1016, data row 17,
// has a NULL humidity and station 1004 a NULL site.
func TestDuckDBNulls(t *testing.T) {
	const path = "testdata/buoys_null.parquet"
	_, err := Read(path, Options{ID: "station_id", Label: "site"})
	wantInputError(t, err, path, "humidity", 17, "value is null")

	got, err := Read(path, Options{ID: "station_id", Label: "site", SkipInvalid: true})
	if err != nil {
		t.Fatal(err)
	}
	if got.N != 39 || got.Skipped != 1 || slices.Contains(got.ID.Ints, 1016) {
		t.Fatalf("N %d skipped %d", got.N, got.Skipped)
	}
	if got.Label.Strings[4] != "" || got.ID.Ints[4] != 1004 {
		t.Errorf("null label read as %q for id %d, want \"\"", got.Label.Strings[4], got.ID.Ints[4])
	}
	// Only water_temp: no null left, nothing skipped.
	got, err = Read(path, Options{Features: []string{"water_temp"}})
	if err != nil || got.N != 40 || got.Skipped != 0 {
		t.Fatalf("water_temp only: %v", err)
	}
}
