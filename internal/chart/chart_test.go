package chart_test

import (
	"bytes"
	"errors"
	"html"
	"image"
	"image/png"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/plot/vg"

	"tamp/client"
	"tamp/internal/chart"
	"tamp/internal/soil"
)

// A reference of invented silty sand: five points peaking near 12 %, Gs 2.68.
var testRef = client.LabReference{
	Reference: client.Reference{
		ID: "ref-1", Material: "Silty sand", LabSampleID: "LS-07", Standard: client.ASTMD698, Method: "A",
		Points: []client.CurvePoint{
			{Moisture: 8, DryDensity: 1820}, {Moisture: 10, DryDensity: 1880}, {Moisture: 12, DryDensity: 1905},
			{Moisture: 14, DryDensity: 1880}, {Moisture: 16, DryDensity: 1825},
		},
		SpecificGravity: 2.68,
	},
	GradingMaxDryDensity: 1905, GradingOptimumMoisture: 12, Fitted: true, Bracketed: true,
}

var testSpec = client.Spec{ID: "spec-1", Name: "Embankment 95", MinCompaction: "95", MoistureBasis: client.PointsOfOptimum,
	MoistureLow: "-2", MoistureHigh: "2"}

// testTests are six tests: four pass, two fail (one low density, one too
// wet), one voided (left out), one of another reference (left out of the
// moisture-density chart).
func testTests() []client.Test {
	start := time.Date(2031, 5, 6, 14, 0, 0, 0, time.UTC)
	mk := func(i int, w, dry float64, v client.Verdict) client.Test {
		return client.Test{
			ID: "t" + string(rune('a'+i)), Taken: start.Add(time.Duration(i) * 95 * time.Minute),
			Content: client.TestInput{ReferenceID: "ref-1", SpecID: "spec-1"},
			Result:  client.Result{Moisture: w, DryDensity: dry, MaxDryDensity: 1905, RelativeCompaction: dry / 1905 * 100, Verdict: v},
		}
	}
	ts := []client.Test{
		mk(0, 11.2, 1850, client.Pass), mk(1, 12.5, 1872, client.Pass), mk(2, 10.4, 1790, client.Fail),
		mk(3, 13.1, 1840, client.Pass), mk(4, 15.0, 1830, client.Fail), mk(5, 11.8, 1862, client.Pass),
	}
	voided := mk(6, 12, 1500, client.Fail)
	voided.Voided = true
	other := mk(7, 9, 1700, client.Fail)
	other.Content.ReferenceID = "ref-2"
	return append(ts, voided, other)
}

// render writes the chart as SVG and PNG into a temporary directory, and
// into $TAMP_CHARTS_DIR when it is set, for a person to look at.
func render(t *testing.T, c *chart.Chart, name string) (svg string, img image.Image) {
	t.Helper()
	dirs := []string{t.TempDir()}
	if d := os.Getenv("TAMP_CHARTS_DIR"); d != "" {
		if err := os.MkdirAll(d, 0o755); err != nil {
			t.Fatal(err)
		}
		dirs = append(dirs, d)
	}
	for _, d := range dirs {
		for _, ext := range []string{".svg", ".png"} {
			if err := c.WriteFile(filepath.Join(d, name+ext)); err != nil {
				t.Fatalf("WriteFile(%s%s): %v", name, ext, err)
			}
		}
	}
	b, err := os.ReadFile(filepath.Join(dirs[0], name+".svg"))
	if err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(filepath.Join(dirs[0], name+".png"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	img, err = png.Decode(f)
	if err != nil {
		t.Fatalf("png.Decode(%s.png): %v", name, err)
	}
	return html.UnescapeString(string(b)), img
}

// checkParts checks that the SVG holds each text and the PNG has the
// chart's size and is not blank.
func checkParts(t *testing.T, svg string, img image.Image, texts ...string) {
	t.Helper()
	for _, s := range texts {
		if !strings.Contains(svg, ">"+s+"<") {
			t.Errorf("SVG has no text %q", s)
		}
	}
	wantW, wantH := int(chart.Width/vg.Inch*chart.DPI), int(chart.Height/vg.Inch*chart.DPI)
	if b := img.Bounds(); b.Dx() != wantW || b.Dy() != wantH {
		t.Errorf("PNG is %dx%d, want %dx%d", b.Dx(), b.Dy(), wantW, wantH)
	}
	colours := map[[4]uint32]bool{}
	b := img.Bounds()
	for y := b.Min.Y; y < b.Max.Y && len(colours) < 3; y += 3 {
		for x := b.Min.X; x < b.Max.X; x += 3 {
			r, g, bl, a := img.At(x, y).RGBA()
			colours[[4]uint32{r, g, bl, a}] = true
		}
	}
	if len(colours) < 2 {
		t.Errorf("PNG has %d colour(s): blank", len(colours))
	}
}

func TestMoistureDensityParts(t *testing.T) {
	for _, tc := range []struct {
		name  string
		units soil.System
		unit  string
	}{{"us", soil.US, "pcf"}, {"si", soil.SI, "kg/m3"}} {
		t.Run(tc.name, func(t *testing.T) {
			c, err := chart.MoistureDensity(testRef, testSpec, testTests(), chart.Options{Units: tc.units})
			if err != nil {
				t.Fatalf("MoistureDensity: %v", err)
			}
			svg, img := render(t, c, "moisture-density-"+tc.name)
			want := []string{
				"Moisture-density: Silty sand LS-07 (ASTM D698)", "spec Embankment 95",
				"Moisture content, % of dry mass", "Dry density, " + tc.unit,
				"Laboratory curve (fitted)", "Laboratory points (5)", "Zero air voids, Gs 2.68",
				"Moisture window, -2 to 2 points", "Field test, passes (4)", "Field test, fails (2)",
			}
			checkParts(t, svg, img, want...)
			if !strings.Contains(svg, ">Min. relative compaction 95 % = ") {
				t.Error("SVG has no legend entry for the minimum relative compaction")
			}
			if slicesIndex(c.Series, "Field test, not graded (0)") >= 0 || strings.Contains(svg, "not graded") {
				t.Error("chart lists a series of ungraded tests it does not have")
			}
		})
	}
}

func TestMoistureDensityWithoutPointsOrGs(t *testing.T) {
	ref := testRef
	ref.Points, ref.SpecificGravity = nil, 0
	c, err := chart.MoistureDensity(ref, testSpec, testTests(), chart.Options{Units: soil.US})
	if err != nil {
		t.Fatalf("MoistureDensity: %v", err)
	}
	svg, img := render(t, c, "moisture-density-peak-only")
	checkParts(t, svg, img, "Field test, passes (4)", "Field test, fails (2)")
	for _, absent := range []string{"Laboratory curve (fitted)", "Zero air voids", "Laboratory points"} {
		if strings.Contains(svg, absent) {
			t.Errorf("SVG shows %q for a reference without it", absent)
		}
	}
}

func TestMoistureDensityRefusesBadInput(t *testing.T) {
	ref := testRef
	ref.GradingMaxDryDensity = 0
	if _, err := chart.MoistureDensity(ref, testSpec, nil, chart.Options{}); !errors.Is(err, chart.ErrNoData) {
		t.Errorf("MoistureDensity(no maximum dry density) = %v, want ErrNoData", err)
	}
	sp := testSpec
	sp.MinCompaction = "ninety-five"
	_, err := chart.MoistureDensity(testRef, sp, nil, chart.Options{})
	if err == nil || !strings.Contains(err.Error(), "min_compaction") {
		t.Errorf("MoistureDensity(min_compaction %q) = %v, want an error naming min_compaction", sp.MinCompaction, err)
	}
}

func TestRunChartParts(t *testing.T) {
	denver, err := time.LoadLocation("America/Denver")
	if err != nil {
		t.Skipf("no time zone data: %v", err)
	}
	c, err := chart.RunChart(testTests(), testSpec, chart.Options{Units: soil.US, Location: denver})
	if err != nil {
		t.Fatalf("RunChart: %v", err)
	}
	svg, img := render(t, c, "run")
	// Seven tests: the voided one is out, the one of another reference
	// (same spec) is in.
	checkParts(t, svg, img, "Relative compaction over time", "spec Embankment 95", "Time taken (America/Denver, MDT)",
		"Relative compaction, %", "Min. relative compaction 95 %", "Tests in time order",
		"Field test, passes (4)", "Field test, fails (3)")
	if !strings.Contains(svg, ">May 6<") {
		t.Error("SVG time axis has no tick dated May 6 in the project's zone")
	}
}

func TestRunChartNoTests(t *testing.T) {
	if _, err := chart.RunChart(nil, testSpec, chart.Options{}); !errors.Is(err, chart.ErrNoData) {
		t.Errorf("RunChart(no tests) = %v, want ErrNoData", err)
	}
}

func TestWriteFileRefusesOtherExtensions(t *testing.T) {
	c, err := chart.RunChart(testTests(), testSpec, chart.Options{})
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "run.jpg")
	if err := c.WriteFile(path); err == nil || !strings.Contains(err.Error(), ".svg or .png") {
		t.Errorf("WriteFile(.jpg) = %v, want an error naming .svg or .png", err)
	}
	if _, err := os.Stat(path); !os.IsNotExist(err) {
		t.Errorf("WriteFile(.jpg) left a file: %v", err)
	}
	var buf bytes.Buffer
	if err := c.WriteSVG(&buf); err != nil || !bytes.HasPrefix(bytes.TrimSpace(buf.Bytes()), []byte("<?xml")) {
		t.Errorf("WriteSVG: err %v, starts %q", err, buf.String()[:min(20, buf.Len())])
	}
}

func slicesIndex(ss []string, s string) int {
	for i, v := range ss {
		if v == s {
			return i
		}
	}
	return -1
}
