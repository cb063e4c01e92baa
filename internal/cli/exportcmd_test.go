package cli

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"tamp/client"
	"tamp/internal/soil"
)

func TestQAExportWritesTestsHistoryAndGeoJSON(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	store := filepath.Join(dir, "tablet.db")
	s, err := client.Open(ctx, store, client.Options{User: "ines"})
	if err != nil {
		t.Fatal(err)
	}
	project := s.NewID()
	pcf := soil.PoundPerCubicFoot
	if err := s.SetUpProject(ctx, project, client.ProjectSetUp{Name: "Sagebrush Bend culvert", Units: client.USCustomary, WaterDensity: soil.Water624}); err != nil {
		t.Fatal(err)
	}
	spec, err := s.DefineSpec(ctx, project, client.Spec{Name: "backfill", MinCompaction: "95"})
	if err != nil {
		t.Fatal(err)
	}
	ref, err := s.AddReference(ctx, project, client.Reference{Material: "grey gravelly sand", Standard: client.ASTMD698, Method: "A",
		MaxDryDensity: 120.0 * pcf, OptimumMoisture: 10.0})
	if err != nil {
		t.Fatal(err)
	}
	// 114.0 pcf dry at 10.0 %: wet 125.4 pcf, RC 95.0 %.
	for i, pos := range []*client.GeoPosition{{Latitude: 43.6, Longitude: -116.4, Accuracy: 2}, nil} {
		_, err := s.RecordTest(ctx, client.TestInput{Project: project, ReferenceID: ref, SpecID: spec, Feature: "culvert backfill", LiftNumber: uint32(i + 1),
			Readings: client.Readings{WetDensity: &client.MeasuredDensity{WetDensity: 125.4 * pcf, Moisture: 10.0}},
			Location: client.Location{Station: float64(100+i) * soil.Foot, Position: pos}})
		if err != nil {
			t.Fatal(err)
		}
	}
	s.Close()

	testsCSV, historyCSV, geo := filepath.Join(dir, "tests.csv"), filepath.Join(dir, "history.csv"), filepath.Join(dir, "tests.geojson")
	out, _, err := run(t, "qa", "export", "--store", store, "--project", project, "--tests", testsCSV, "--history", historyCSV, "--geojson", geo)
	if err != nil {
		t.Fatalf("tamp qa export: %v\n%s", err, out)
	}
	for _, want := range []string{"2 test(s) written to", "the history of 2 test(s)", "1 test location(s) written", "1 test(s) left out of the map", "no satellite position"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}

	data, err := os.ReadFile(testsCSV)
	if err != nil {
		t.Fatal(err)
	}
	r := csv.NewReader(bytes.NewReader(data))
	recs, err := r.ReadAll() // FieldsPerRecord 0: every record as wide as the header
	if err != nil {
		t.Fatalf("tests.csv: %v", err)
	}
	if len(recs) != 3 {
		t.Fatalf("tests.csv has %d records, want a header and 2 tests", len(recs))
	}
	col := map[string]int{}
	for i, h := range recs[0] {
		col[h] = i
	}
	for _, rec := range recs[1:] {
		if rec[col["dry_density_pcf"]] != "114.0" || rec[col["relative_compaction_pct"]] != "95.0" || rec[col["verdict"]] != "pass" {
			t.Errorf("test %s: dry %q RC %q verdict %q, want 114.0, 95.0, pass (worked by hand)", rec[col["test_id"]],
				rec[col["dry_density_pcf"]], rec[col["relative_compaction_pct"]], rec[col["verdict"]])
		}
	}
	hist, err := os.ReadFile(historyCSV)
	if err != nil || bytes.Count(hist, []byte("\r\n")) != 3 {
		t.Errorf("history.csv: %v, %d lines, want a header and 2 revisions", err, bytes.Count(hist, []byte("\r\n")))
	}
	var fc struct {
		Type     string
		Features []struct {
			Geometry struct{ Coordinates []float64 }
		}
	}
	gj, err := os.ReadFile(geo)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(gj, &fc); err != nil || fc.Type != "FeatureCollection" || len(fc.Features) != 1 {
		t.Fatalf("tests.geojson: %v %+v", err, fc)
	}
	if c := fc.Features[0].Geometry.Coordinates; len(c) != 2 || c[0] != -116.4 || c[1] != 43.6 {
		t.Errorf("coordinates %v, want [-116.4, 43.6]", c)
	}

	if msg := func() string {
		_, _, err := run(t, "qa", "export", "--store", store, "--project", project)
		if err == nil {
			return ""
		}
		return err.Error()
	}(); !strings.Contains(msg, "--tests FILE.csv") {
		t.Errorf("export without a file: %q, want it to name the flags", msg)
	}
	entries, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range entries {
		if strings.HasPrefix(e.Name(), ".") {
			t.Errorf("a temporary file %s was left beside the exports", e.Name())
		}
	}
}
