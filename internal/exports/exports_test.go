package exports

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"flag"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"tamp/client"
	"tamp/internal/soil"
)

var update = flag.Bool("update", false, "rewrite the golden files in testdata")

// hostile is text a person might type that a CSV or a spreadsheet could
// misread: commas, quotes, a newline and a formula.
const (
	hostileFeature = `=cmd|' /C calc'!A0`
	hostileRemarks = "north end, \"soft\" spot\nre-rolled; see sheet 4"
	hostileDesc    = `@SUM(A1:A9), 3 m "left" of stake`
	minusRemarks   = "-2 points dry, watered"
	quoteRemarks   = "'quoted already"
)

type seeded struct{ r *rand.ChaCha8 }

func (s seeded) Read(p []byte) (int, error) { return s.r.Read(p) }

// fixture is a small project recorded through a real store on a temporary
// file with a pinned clock and randomness, so its ids and times are the
// same on every run.
type fixture struct {
	tests   []client.Test
	project string
	byKey   map[string]string // a name for each test -> its id
}

func record(t *testing.T) fixture {
	t.Helper()
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "device.db")
	now := time.Date(2026, 9, 14, 14, 0, 0, 0, time.UTC)
	clock := func() time.Time { return now }
	tick := func() { now = now.Add(7 * time.Minute) }
	var seed [32]byte
	seed[0] = 12
	rnd := seeded{rand.NewChaCha8(seed)}
	open := func(user string) *client.Store {
		s, err := client.Open(ctx, path, client.Options{User: user, Now: clock, Rand: rnd})
		if err != nil {
			t.Fatal(err)
		}
		return s
	}
	must := func(err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
	}
	pcf := soil.PoundPerCubicFoot
	s := open("ines")
	project := s.NewID()
	must(s.SetUpProject(ctx, project, client.ProjectSetUp{Name: "Larkspur Flats haul road", Units: client.USCustomary,
		WaterDensity: soil.Water624, TimeZone: "America/Boise"}))
	tick()
	spec, err := s.DefineSpec(ctx, project, client.Spec{Name: "subgrade", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"})
	must(err)
	tick()
	ref, err := s.AddReference(ctx, project, client.Reference{Material: "brown silty sand", Standard: client.ASTMD698, Method: "A",
		Edition: 2012, MaxDryDensity: 116.0 * pcf, OptimumMoisture: 13.5, SpecificGravity: 2.65})
	must(err)

	// Sand-cone readings of dry density dry pcf at moisture w: sand of 99.0
	// pcf, 7.00 lb used, 0.53 lb in the cone.
	cone := func(dry, w float64) client.Readings {
		sd := 99.0 * pcf
		used, cone := 7.00*soil.Pound, 0.53*soil.Pound
		vol := (used - cone) / sd
		return client.Readings{SandCone: &client.SandCone{SandDensity: sd, SandUsed: used, ConeCorrection: cone,
			SoilMass: dry * pcf * (1 + w/100) * vol, Moisture: w}}
	}
	at := func(station float64) client.TestInput {
		return client.TestInput{Project: project, ReferenceID: ref, SpecID: spec, Feature: "subgrade", LiftNumber: 2,
			LiftThickness: 8 * soil.Inch, Location: client.Location{Station: station * soil.Foot, Offset: -6 * soil.Foot, Elevation: 812.4 * soil.Foot}}
	}
	ids := map[string]string{}
	rec := func(name string, in client.TestInput) {
		t.Helper()
		tick()
		r, err := s.RecordTest(ctx, in)
		must(err)
		ids[name] = r.TestID
	}

	// A passing sand cone with a position and hostile text: 111.6 pcf at
	// 12.0 % against 116.0 pcf and 13.5 %: RC 96.2 %, -1.5 points.
	in := at(1210)
	in.Readings = cone(111.6, 12.0)
	in.Feature = hostileFeature
	in.Remarks = hostileRemarks
	in.Location.Description = hostileDesc
	in.Location.Position = &client.GeoPosition{Latitude: 43.6, Longitude: -116.4, Accuracy: 3}
	rec("pass", in)

	// A failing nuclear test without a position: wet 118.0, water 16.0 pcf
	// gives dry 102.0 pcf, RC 87.9 %.
	in = at(1260)
	in.Readings = client.Readings{Nuclear: &client.NuclearGauge{ProbeDepth: 8 * soil.Inch,
		Readings: []client.GaugeReading{{WetDensity: 118.0 * pcf, WaterPerVolume: 16.0 * pcf}}}}
	in.Remarks = minusRemarks
	rec("fail", in)

	// Its retest after rework, with a position.
	tick()
	rt, err := s.RecordRetest(ctx, project, ids["fail"], client.RetestInput{Readings: cone(112.0, 13.0),
		Location: &client.Location{Station: 1262 * soil.Foot, Offset: -5 * soil.Foot, Elevation: 812.4 * soil.Foot,
			Position: &client.GeoPosition{Latitude: 43.6004, Longitude: -116.4011, Accuracy: 4}}})
	must(err)
	ids["retest"] = rt.TestID

	// A drive cylinder corrected after a typing error.
	in = at(1300)
	in.Readings = client.Readings{DriveCylinder: &client.DriveCylinder{Diameter: 4 * soil.Inch, Length: 5 * soil.Inch,
		SoilMass: 4.10 * soil.Pound, Moisture: 21.0}}
	in.Remarks = quoteRemarks
	rec("corrected", in)
	tick()
	_, err = s.CorrectTest(ctx, project, ids["corrected"], "moisture typed as 21.0 for 12.0", func(c *client.TestInput) {
		c.Readings.DriveCylinder.Moisture = 12.0
	})
	must(err)

	// A rubber balloon voided.
	in = at(1350)
	in.Readings = client.Readings{RubberBalloon: &client.RubberBalloon{InitialReading: 0.0100 * soil.CubicFoot,
		FinalReading: 0.0700 * soil.CubicFoot, SoilMass: 8.20 * soil.Pound, Moisture: 12.5}}
	rec("voided", in)
	tick()
	must(s.VoidTest(ctx, project, ids["voided"], "tested the wrong lift"))

	// A measured wet density that fails, accepted by QA as it stands.
	in = at(1400)
	in.Readings = client.Readings{WetDensity: &client.MeasuredDensity{WetDensity: 120.0 * pcf, Moisture: 17.0}}
	rec("exception", in)
	must(s.Close())

	s = open("omar") // the office, on the same device
	tick()
	must(s.ReviewTest(ctx, project, ids["pass"], client.Approve, ""))
	tick()
	must(s.ReviewTest(ctx, project, ids["corrected"], client.Return, "=HYPERLINK(\"x\") sheet, missing"))
	must(s.Close())
	s = open("quinn") // QA
	tick()
	must(s.AcceptException(ctx, project, ids["exception"], "wet of optimum, engineer accepts"))
	tests := s.Tests(project)
	must(s.Close())
	if len(tests) != 6 {
		t.Fatalf("the fixture holds %d tests, want 6", len(tests))
	}
	return fixture{tests: tests, project: project, byKey: ids}
}

// uuidPattern matches the ids the store makes (UUIDv7).
var uuidPattern = regexp.MustCompile(`[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}`)

// stableIDs replaces each id in data with id-1, id-2... in the order of
// first appearance: the store's ids carry a process-wide monotonic part,
// so they differ between runs while the export's shape does not.
func stableIDs(data []byte) []byte {
	seen := map[string]string{}
	return uuidPattern.ReplaceAllFunc(data, func(id []byte) []byte {
		s, ok := seen[string(id)]
		if !ok {
			s = fmt.Sprintf("id-%d", len(seen)+1)
			seen[string(id)] = s
		}
		return []byte(s)
	})
}

// golden compares got, its ids made stable, with testdata/name, or
// rewrites it under -update.
func golden(t *testing.T, name string, got []byte) {
	t.Helper()
	got = stableIDs(got)
	path := filepath.Join("testdata", name)
	if *update {
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
		return
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test -update to write it)", err)
	}
	if !bytes.Equal(got, want) {
		t.Errorf("%s differs from the golden file (go test -update rewrites it after a deliberate change)\ngot:\n%s", name, got)
	}
}

// readStrict reads a CSV as RFC 4180 strictly: no lazy quotes, every
// record as wide as the header; it returns the rows as maps by column.
func readStrict(t *testing.T, data []byte) ([]string, []map[string]string) {
	t.Helper()
	if !bytes.HasSuffix(data, []byte("\r\n")) {
		t.Error("the CSV does not end with CRLF")
	}
	if n := bytes.Count(data, []byte("\n")); n != bytes.Count(data, []byte("\r\n")) {
		t.Errorf("the CSV has %d line feeds without a carriage return before them", n-bytes.Count(data, []byte("\r\n")))
	}
	r := csv.NewReader(bytes.NewReader(data))
	r.LazyQuotes = false
	header, err := r.Read()
	if err != nil {
		t.Fatal(err)
	}
	r.FieldsPerRecord = len(header)
	var rows []map[string]string
	for {
		rec, err := r.Read()
		if err != nil {
			if err.Error() == "EOF" {
				break
			}
			t.Fatalf("strict CSV read: %v", err)
		}
		m := map[string]string{}
		for i, h := range header {
			m[h] = rec[i]
		}
		rows = append(rows, m)
	}
	return header, rows
}

func TestTestsCSVGoldenAndStrict(t *testing.T) {
	fx := record(t)
	var buf bytes.Buffer
	if err := TestsCSV(&buf, fx.tests, soil.US); err != nil {
		t.Fatal(err)
	}
	golden(t, "tests_us.csv", buf.Bytes())
	header, rows := readStrict(t, buf.Bytes())
	if len(rows) != len(fx.tests) {
		t.Fatalf("%d rows, want one per test (%d)", len(rows), len(fx.tests))
	}
	if seen := map[string]bool{}; true {
		for _, h := range header {
			if seen[h] {
				t.Errorf("column %s appears twice", h)
			}
			seen[h] = true
		}
	}
	for i, tt := range fx.tests {
		row := rows[i]
		if row["test_id"] != tt.ID || row["revision_id"] != tt.Current {
			t.Errorf("row %d is test %s revision %s, want %s %s", i, row["test_id"], row["revision_id"], tt.ID, tt.Current)
		}
		if got, want := row["dry_density_pcf"], fixed(tt.Result.DryDensity/soil.PoundPerCubicFoot, 1); got != want {
			t.Errorf("test %s dry_density_pcf=%q, want %q", tt.ID, got, want)
		}
		if row["verdict"] != string(tt.Result.Verdict) || row["method"] != string(tt.Content.Readings.Method()) {
			t.Errorf("test %s verdict %q method %q, want %q %q", tt.ID, row["verdict"], row["method"], tt.Result.Verdict, tt.Content.Readings.Method())
		}
		if CellText(row["feature"]) != tt.Content.Feature || CellText(row["remarks"]) != tt.Content.Remarks ||
			CellText(row["location_description"]) != tt.Content.Location.Description {
			t.Errorf("test %s text did not round-trip: feature %q remarks %q description %q", tt.ID, row["feature"], row["remarks"], row["location_description"])
		}
		if row["voided"] != boolCell(tt.Voided) || row["retest_of"] != tt.RetestOf || row["review_status"] != string(tt.ReviewStatus) {
			t.Errorf("test %s voided %q retest_of %q review %q", tt.ID, row["voided"], row["retest_of"], row["review_status"])
		}
	}
	byID := map[string]map[string]string{}
	for _, r := range rows {
		byID[r["test_id"]] = r
	}
	// Worked by hand: 111.6 pcf at 12.0 % against 116.0 pcf and 13.5 %.
	pass := byID[fx.byKey["pass"]]
	for col, want := range map[string]string{"dry_density_pcf": "111.6", "moisture_pct": "12.0", "max_dry_density_pcf": "116.0",
		"optimum_moisture_pct": "13.5", "relative_compaction_pct": "96.2", "moisture_deviation_points": "-1.5", "verdict": "pass",
		"latitude_deg": "43.6000000", "longitude_deg": "-116.4000000", "station_ft": "1210.00", "offset_ft": "-6.00",
		"sand_cone_sand_used_lb": "7.00", "sand_cone_cone_correction_lb": "0.53", "sand_cone_initial_mass_lb": "",
		"nuclear_wet_density_1_pcf": "", "review_status": "approved", "feature": "'" + hostileFeature} {
		if pass[col] != want {
			t.Errorf("passing test %s=%q, want %q", col, pass[col], want)
		}
	}
	// 118.0 wet, 16.0 water per volume: dry 102.0 pcf, RC 102.0/116.0 = 87.9 %.
	fail := byID[fx.byKey["fail"]]
	for col, want := range map[string]string{"dry_density_pcf": "102.0", "relative_compaction_pct": "87.9", "verdict": "fail",
		"reasons": "compaction_below_minimum", "latitude_deg": "", "nuclear_wet_density_1_pcf": "118.0",
		"nuclear_water_per_volume_1_pcf": "16.0", "nuclear_probe_depth_in": "8.0", "sand_cone_soil_mass_lb": "",
		"retests": fx.byKey["retest"], "remarks": "'" + minusRemarks} {
		if fail[col] != want {
			t.Errorf("failing test %s=%q, want %q", col, fail[col], want)
		}
	}
	if c := byID[fx.byKey["corrected"]]; c["revisions"] != "2" || c["drive_cylinder_moisture_pct"] != "12.0" || c["review_status"] != "returned" {
		t.Errorf("corrected test: revisions %q moisture %q review %q, want 2, 12.0 (the correction), returned", c["revisions"],
			c["drive_cylinder_moisture_pct"], c["review_status"])
	}
	if v := byID[fx.byKey["voided"]]; v["voided"] != "true" || v["rubber_balloon_final_reading_ft3"] != "0.070000" {
		t.Errorf("voided test: voided %q final reading %q", v["voided"], v["rubber_balloon_final_reading_ft3"])
	}
	if e := byID[fx.byKey["exception"]]; e["exception_accepted"] != "true" || e["verdict"] != "fail" {
		t.Errorf("excepted test: exception_accepted %q verdict %q", e["exception_accepted"], e["verdict"])
	}
}

func TestTestsCSVInSI(t *testing.T) {
	fx := record(t)
	var buf bytes.Buffer
	if err := TestsCSV(&buf, fx.tests, soil.SI); err != nil {
		t.Fatal(err)
	}
	golden(t, "tests_si.csv", buf.Bytes())
	_, rows := readStrict(t, buf.Bytes())
	// 111.6 pcf x 16.018463 = 1787.7 -> 1788 kg/m3; 1210 ft = 368.81 m.
	pass := rows[0]
	for col, want := range map[string]string{"dry_density_kg_m3": "1788", "station_m": "368.81", "relative_compaction_pct": "96.2",
		"sand_cone_sand_used_g": "3175.1", "lift_thickness_mm": "203.2"} {
		if pass[col] != want {
			t.Errorf("SI %s=%q, want %q", col, pass[col], want)
		}
	}
}

func TestHistoryCSV(t *testing.T) {
	fx := record(t)
	var buf bytes.Buffer
	if err := HistoryCSV(&buf, fx.tests, soil.US); err != nil {
		t.Fatal(err)
	}
	golden(t, "history_us.csv", buf.Bytes())
	_, rows := readStrict(t, buf.Bytes())
	count := map[string]int{}
	for _, r := range rows {
		count[r["kind"]]++
	}
	// 6 originals and 1 correction; 1 void; 2 reviews; 1 exception.
	for kind, want := range map[string]int{RevisionRow: 7, VoidRow: 1, ReviewRow: 2, ExceptionRow: 1} {
		if count[kind] != want {
			t.Errorf("%d %s rows, want %d", count[kind], kind, want)
		}
	}
	var orig, corr map[string]string
	for _, r := range rows {
		if r["test_id"] == fx.byKey["corrected"] && r["kind"] == RevisionRow {
			if r["supersedes"] == "" {
				orig = r
			} else {
				corr = r
			}
		}
		if r["kind"] == ReviewRow && r["decision"] == "return" && CellText(r["reason"]) != "=HYPERLINK(\"x\") sheet, missing" {
			t.Errorf("the return's comment did not round-trip: %q", r["reason"])
		}
	}
	if orig == nil || corr == nil {
		t.Fatal("the corrected test's two revisions are not both in the history")
	}
	if corr["supersedes"] != orig["event_id"] || corr["reason"] != "moisture typed as 21.0 for 12.0" || corr["current"] != "true" || orig["current"] != "false" {
		t.Errorf("correction row: supersedes %q (want %q) reason %q current %q/%q", corr["supersedes"], orig["event_id"], corr["reason"], corr["current"], orig["current"])
	}
	if orig["drive_cylinder_moisture_pct"] != "21.0" || corr["drive_cylinder_moisture_pct"] != "12.0" {
		t.Errorf("revision readings: original %q, correction %q, want 21.0 and 12.0", orig["drive_cylinder_moisture_pct"], corr["drive_cylinder_moisture_pct"])
	}
}

// geo is an RFC 7946 FeatureCollection as a reader decodes it.
type geo struct {
	Type     string `json:"type"`
	Features []struct {
		Type     string `json:"type"`
		ID       string `json:"id"`
		Geometry struct {
			Type        string    `json:"type"`
			Coordinates []float64 `json:"coordinates"`
		} `json:"geometry"`
		Properties map[string]any `json:"properties"`
	} `json:"features"`
}

func TestTestsGeoJSONStructure(t *testing.T) {
	fx := record(t)
	var buf bytes.Buffer
	skipped, err := TestsGeoJSON(&buf, fx.tests, soil.US)
	if err != nil {
		t.Fatal(err)
	}
	golden(t, "tests_us.geojson", buf.Bytes())
	var g geo
	dec := json.NewDecoder(bytes.NewReader(buf.Bytes()))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&g); err != nil {
		t.Fatalf("decode: %v", err)
	}
	if g.Type != "FeatureCollection" {
		t.Errorf("type=%q, want FeatureCollection", g.Type)
	}
	if len(g.Features) != 2 || len(skipped) != 4 {
		t.Fatalf("%d features and %d skipped, want 2 with a position and 4 skipped", len(g.Features), len(skipped))
	}
	for _, f := range g.Features {
		c := f.Geometry.Coordinates
		if f.Type != "Feature" || f.Geometry.Type != "Point" || len(c) != 2 {
			t.Fatalf("feature %s: type %q geometry %q coordinates %v", f.ID, f.Type, f.Geometry.Type, c)
		}
		if c[0] < -180 || c[0] > 180 || c[1] < -90 || c[1] > 90 {
			t.Errorf("feature %s: coordinates %v out of range", f.ID, c)
		}
		if f.Properties["test_id"] != f.ID || f.Properties["dry_density_unit"] != "pcf" {
			t.Errorf("feature %s: properties %v", f.ID, f.Properties)
		}
	}
	first := g.Features[0]
	if first.ID != fx.byKey["pass"] || first.Geometry.Coordinates[0] != -116.4 || first.Geometry.Coordinates[1] != 43.6 {
		t.Errorf("the test at latitude 43.6, longitude -116.4 is %s at %v, want [-116.4, 43.6]", first.ID, first.Geometry.Coordinates)
	}
	if first.Properties["relative_compaction_pct"] != 96.2 || first.Properties["dry_density"] != 111.6 || first.Properties["verdict"] != "pass" {
		t.Errorf("passing test properties: %v", first.Properties)
	}
	for _, s := range skipped {
		if s.Reason != NoPosition {
			t.Errorf("skipped %s: %s, want %s", s.TestID, s.Reason, NoPosition)
		}
	}
	if skipped[0].TestID != fx.byKey["fail"] {
		t.Errorf("first skipped %s, want the failing test without a position %s", skipped[0].TestID, fx.byKey["fail"])
	}
}

func TestTestsGeoJSONSkipsOutOfRange(t *testing.T) {
	tests := []client.Test{
		{ID: "t-lat", Content: client.TestInput{Location: client.Location{Position: &client.GeoPosition{Latitude: 116.4, Longitude: 43.6}}}},
		{ID: "t-lon", Content: client.TestInput{Location: client.Location{Position: &client.GeoPosition{Latitude: 43.6, Longitude: -196.4}}}},
		{ID: "t-ok", Content: client.TestInput{Location: client.Location{Position: &client.GeoPosition{Latitude: -90, Longitude: 180}}}},
	}
	var buf bytes.Buffer
	skipped, err := TestsGeoJSON(&buf, tests, soil.SI)
	if err != nil {
		t.Fatal(err)
	}
	if len(skipped) != 2 || skipped[0].Reason != PositionOutOfRange || skipped[1].Reason != PositionOutOfRange {
		t.Errorf("skipped %v, want t-lat and t-lon out of range", skipped)
	}
	var g geo
	if err := json.Unmarshal(buf.Bytes(), &g); err != nil {
		t.Fatal(err)
	}
	if len(g.Features) != 1 || g.Features[0].ID != "t-ok" {
		t.Fatalf("features %+v, want t-ok only", g.Features)
	}
	if p := g.Features[0].Properties; p["relative_compaction_pct"] != nil || p["dry_density"] != nil {
		t.Errorf("an ungraded test's values are %v and %v, want null", p["relative_compaction_pct"], p["dry_density"])
	}
}

func TestReportJSON(t *testing.T) {
	type row struct {
		Placement string  `json:"placement"`
		Required  int     `json:"required"`
		Taken     int     `json:"taken"`
		Volume    float64 `json:"compacted_volume"`
	}
	var buf bytes.Buffer
	if err := ReportJSON(&buf, "frequency", []row{{"subgrade lift 2", 3, 2, 1250.5}}); err != nil {
		t.Fatal(err)
	}
	golden(t, "frequency.json", buf.Bytes())
	var got struct {
		Schema  string `json:"schema"`
		Version int    `json:"version"`
		Report  string `json:"report"`
		Data    []row  `json:"data"`
	}
	if err := json.Unmarshal(buf.Bytes(), &got); err != nil {
		t.Fatal(err)
	}
	if got.Schema != ReportSchema || got.Version != ReportSchemaVersion || got.Report != "frequency" || len(got.Data) != 1 || got.Data[0].Taken != 2 {
		t.Errorf("report = %+v", got)
	}
	for _, bad := range []string{"", "Frequency", "../lots", "1lots", strings.Repeat("a", 65)} {
		if err := ReportJSON(&bytes.Buffer{}, bad, nil); err == nil || !strings.Contains(err.Error(), "report name") {
			t.Errorf("ReportJSON(%q) = %v, want an error naming the report name's rule", bad, err)
		}
	}
}

func TestTextCellRule(t *testing.T) {
	for _, s := range []string{"=1+2", "+1", "-1", "@A1", "\tx", "\rx", "'", "''=x", "plain", "", "a=b", "5"} {
		cell := text(s)
		if CellText(cell) != s {
			t.Errorf("CellText(text(%q)) = %q", s, CellText(cell))
		}
		if cell != "" && strings.IndexByte("=+-@\t\r", cell[0]) >= 0 {
			t.Errorf("text(%q) = %q starts with a formula character", s, cell)
		}
	}
}
