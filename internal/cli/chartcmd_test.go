package cli

import (
	"image/png"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// tamp qa chart draws both charts from a device's copy of a small project
// and writes them as SVG and PNG; a bad --out or a missing choice is refused.
func TestQAChart(t *testing.T) {
	c := newCrew(t, "Juniper Flat haul road", "us")
	c.member("qa", "Quinn Ashby", "qa")
	c.member("insp", "Ines Cardenas", "inspector")
	c.as("qa", "spec", "add", "--name", "embankment", "--min-rc", "95", "--moisture-window", "-2,2")
	c.as("qa", "reference", "add", "--sample", "L-12", "--material", "brown silty sand", "--standard", "D698", "--method", "A",
		"--points", "8.5:112.0,10.5:115.2,12.5:116.1,14.5:113.4", "--gs", "2.68")
	c.as("qa", "sync")
	c.as("insp", "sync")
	for i, wet := range []string{"125.0", "118.0"} {
		c.as("insp", "test", "record", "--method", "wet-density", "--wet-density", wet, "--moisture", "11.0",
			"--station", "12+"+[]string{"10", "50"}[i], "--offset", "6R", "--feature", "embankment", "--lift", "4",
			"--spec", "embankment", "--reference", "L-12")
	}
	dir := t.TempDir()
	svgPath, pngPath := filepath.Join(dir, "l-12.svg"), filepath.Join(dir, "run.png")
	holds(t, "qa chart --reference", c.as("insp", "qa", "chart", "--reference", "L-12", "--out", svgPath),
		"written to "+svgPath, "Field test, passes (1)", "Field test, fails (1)")
	b, err := os.ReadFile(svgPath)
	if err != nil {
		t.Fatal(err)
	}
	holds(t, "the moisture-density SVG", string(b), "Dry density, pcf", "Moisture content, % of dry mass", "brown silty sand L-12",
		"Zero air voids, Gs 2.68", "Laboratory curve (fitted)", "spec embankment")
	holds(t, "qa chart --run", c.as("insp", "qa", "chart", "--run", "--out", pngPath), "Relative compaction over time", "Min. relative compaction 95 %")
	f, err := os.Open(pngPath)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if _, err := png.Decode(f); err != nil {
		t.Errorf("the run chart is not a PNG: %v", err)
	}
	if msg := c.fails("insp", "qa", "chart", "--run", "--out", filepath.Join(dir, "run.jpg")); !strings.Contains(msg, ".svg or .png") {
		t.Errorf("qa chart --out run.jpg: %s", msg)
	}
	if msg := c.fails("insp", "qa", "chart", "--out", svgPath); !strings.Contains(msg, "--reference") {
		t.Errorf("qa chart without --reference or --run: %s", msg)
	}
	if msg := c.fails("insp", "qa", "chart", "--reference", "L-99", "--out", svgPath); !strings.Contains(msg, "no laboratory reference") {
		t.Errorf("qa chart --reference L-99: %s", msg)
	}
}
