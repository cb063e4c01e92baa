package cli

import (
	"strings"
	"testing"
)

// The readings of one test by each method, in US customary units, and
// whether the test passes against "embankment" (95 %, -2..+2) and the
// reference L-12 (maximum 116.1 pcf fitted, optimum 11.8 %).
var methodReadings = []struct {
	method string
	args   []string
	pass   bool
}{
	{"sand-cone", []string{"--sand-used", "7.00", "--cone-correction", "0.53", "--sand-density", "99.0", "--soil-mass", "8.11", "--moisture", "11.1"}, true},
	{"nuclear-direct", []string{"--wet-density", "124.2,123.6", "--water-per-volume", "14.1,14.3", "--probe-depth", "8"}, true},
	{"nuclear-backscatter", []string{"--wet-density", "118.0", "--water-per-volume", "13.0"}, false},
	{"drive-cylinder", []string{"--cylinder-diameter", "4.0", "--cylinder-length", "5.0", "--soil-mass", "4.45", "--moisture", "12.2"}, false},
	{"rubber-balloon", []string{"--balloon-initial", "0.080", "--balloon-final", "0.135", "--soil-mass", "6.9", "--moisture", "11.5"}, true},
	{"wet-density", []string{"--wet-density", "125.0", "--moisture", "11.0"}, true},
}

// A small day of every role, driven through tamp against a real tampd:
// the administrator sets the project up; QA its specs, reference and
// borrow source; the office its equipment and placement; the inspector
// records a test by every method, corrects one, voids one and retests a
// failure; the office reviews; QA's reports print and decode; every sync
// summary tells what happened.
func TestSmallDay(t *testing.T) {
	c := newCrew(t, "Cinder Butte interchange", "us")
	c.member("qa", "Quinn Ashby", "qa")
	c.member("office", "Otto Brandt", "office")
	c.member("insp", "Ines Cardenas", "inspector")

	// QA's set-up.
	holds(t, "spec add", c.as("qa", "spec", "add", "--name", "embankment", "--min-rc", "95", "--moisture-window", "-2,2",
		"--volume-per-test", "100"), `spec "embankment" defined`)
	out := c.as("qa", "reference", "add", "--sample", "L-12", "--material", "brown silty sand", "--standard", "D698", "--method", "A",
		"--points", "8.5:112.0,10.5:115.2,12.5:116.1,14.5:113.4", "--gs", "2.68")
	holds(t, "reference add", out, "maximum dry density 116.1 pcf at 11.8 % optimum moisture, fitted to 4 points", "ASTM D698 method A")
	c.as("qa", "reference", "add", "--material", "crushed base", "--standard", "AASHTO T 180", "--method", "D", "--mdd", "138.5", "--omc", "6.8")
	holds(t, "borrow add", c.as("qa", "borrow", "add", "--name", "Quarry Hill pit", "--bank-test", "118.5:9.8,120.1:10.4",
		"--loose-dry-density", "92.0", "--reference", "L-12"), "bank dry density 108.4 pcf, mean of 2 test(s)")
	holds(t, "QA's sync", c.as("qa", "sync"), `"Cinder Butte interchange": sent 4 entries (4 accepted`)

	// The office's equipment and placement.
	c.as("office", "sync")
	holds(t, "equipment add", c.as("office", "equipment", "add", "--kind", "nuclear-gauge", "--model", "MD-4", "--serial", "40417",
		"--calibration-due", "2099-11-30"), `nuclear gauge "MD-4 40417" registered`)
	c.as("office", "equipment", "add", "--kind", "sand-cone", "--model", "6 in cone", "--serial", "SC-2")
	holds(t, "placement add", c.as("office", "placement", "add", "--feature", "embankment", "--lift", "4", "--from", "12+00", "--to", "14+00",
		"--left", "30", "--right", "30", "--thickness", "8", "--borrow", "Quarry Hill pit"),
		`placement "embankment lift 4" recorded`, "296.3 yd3 compacted") // 200 ft x 60 ft x 8 in = 8000 ft3
	c.as("office", "haul", "add", "--borrow", "Quarry Hill pit", "--loads", "42", "--load-volume", "12", "--placement", "embankment lift 4")
	holds(t, "office's sync", c.as("office", "sync"), "sent 4 entries (4 accepted", "received 0 entries from other devices")

	// The inspector's enrolment pulled the set-up and the devices'
	// introductions; this sync brings QA's four entries and the office's
	// four, each once.
	var first []struct {
		Report struct {
			Pulled int
			Head   struct{ Seq int }
		}
		Name string
	}
	decode(t, c.as("insp", "sync", "--json"), &first)
	if len(first) != 1 || first[0].Name != "Cinder Butte interchange" || first[0].Report.Pulled != 8 || first[0].Report.Head.Seq != 13 {
		t.Errorf("the inspector's first sync: %+v, want 8 pulled of a ledger of 13", first)
	}
	holds(t, "standard count", c.as("insp", "equipment", "count", "--gauge", "40417", "--density-count", "2815", "--moisture-count", "688"),
		`standard count of gauge "MD-4 40417"`, "accepted", "licensed radioactive sources")
	ids := map[string]string{}
	for i, m := range methodReadings {
		args := append([]string{"test", "record", "--method", m.method, "--station", "12+" + []string{"10", "30", "50", "70", "90", "95"}[i],
			"--offset", "6R", "--feature", "embankment", "--lift", "4", "--spec", "embankment", "--reference", "L-12"}, m.args...)
		if strings.HasPrefix(m.method, "nuclear") {
			args = append(args, "--gauge", "40417")
		}
		var res recordedJSONDecoded
		decode(t, c.as("insp", append(args, "--json")...), &res)
		ids[m.method] = res.ShortID
		if got := res.Result.Verdict == "pass"; got != m.pass {
			t.Errorf("%s: verdict %s (RC %v), want pass=%v", m.method, res.Result.Verdict, res.Result.RelativeCompaction, m.pass)
		}
		if res.Result.Units != "us" || res.Result.Limits.SpecName != "embankment" || len(res.Steps) == 0 {
			t.Errorf("%s: result %+v", m.method, res)
		}
		nuclear := strings.Contains(strings.Join(res.Cautions, " "), "radioactive")
		if nuclear != strings.HasPrefix(m.method, "nuclear") {
			t.Errorf("%s: cautions %q", m.method, res.Cautions)
		}
	}
	// The text output: steps, the limit beside the value judged, the
	// verdict in words and the cautions.
	out = c.as("insp", "test", "record", "--method", "sand-cone", "--sand-used", "7.00", "--cone-correction", "0.53", "--sand-density", "99.0",
		"--soil-mass", "8.11", "--moisture", "11.1", "--station", "13+20", "--offset", "2L", "--feature", "embankment", "--lift", "4",
		"--spec", "embankment", "--reference", "L-12", "--gauge", "SC-2")
	holds(t, "test record", out, "sand cone (ASTM D1556 / AASHTO T 191), us units", "hole volume = sand in hole / sand density",
		"dry density                  111.7 pcf", "relative compaction          96.2 %   (min 95 %)",
		"moisture against optimum     -0.7 points   (-2 to +2 points of optimum)", `Verdict: PASS against spec "embankment"`,
		"AASHTO R 11 / ASTM E29", "review by qualified personnel", "at 13+20.00, 2.00 ft L")

	// Corrections, voids and retests.
	drive := ids["drive-cylinder"]
	holds(t, "correct", c.as("insp", "test", "correct", drive, "--soil-mass", "4.55", "--reason", "soil mass misread from the scale"),
		"Verdict: PASS")
	balloon := ids["rubber-balloon"]
	holds(t, "void", c.as("insp", "test", "void", balloon, "--reason", "tested the haul road by mistake"), "voided: tested the haul road by mistake")
	back := ids["nuclear-backscatter"]
	var failures []testJSONDecoded
	decode(t, c.as("insp", "test", "failures", "--json"), &failures)
	if len(failures) != 1 || failures[0].ShortID != back {
		t.Errorf("open failures: %+v, want only %s", failures, back)
	}
	retest := c.as("insp", "test", "retest", back, "--wet-density", "126.0", "--water-per-volume", "13.2")
	holds(t, "retest", retest, "(retest of "+back+")", "Verdict: PASS", "at 12+50.00, 6.00 ft R")
	holds(t, "failures after the retest", c.as("insp", "test", "failures"), "No open failures")
	var last testJSONDecoded
	decode(t, c.as("insp", "test", "show", "last", "--json"), &last)
	if !strings.Contains(retest, "Test "+last.ShortID+",") {
		t.Errorf("test show last is %s, not the retest just taken:\n%s", last.ShortID, retest)
	}

	var today []testJSONDecoded
	decode(t, c.as("insp", "test", "today", "--json"), &today)
	if len(today) != 8 {
		t.Errorf("today lists %d tests, want 8", len(today))
	}
	var shown testJSONDecoded
	decode(t, c.as("insp", "test", "show", drive, "--json"), &shown)
	if len(shown.History) != 2 || shown.History[1].Entry != "corrected" || shown.History[1].Reason != "soil mass misread from the scale" ||
		shown.History[0].By != "Ines Cardenas" || shown.Spec != "embankment" || shown.Reference != "L-12 brown silty sand" ||
		shown.Placement != "embankment lift 4" {
		t.Errorf("test show --json: %+v", shown)
	}
	holds(t, "test show", c.as("insp", "test", "show", drive), "History:", "corrected  soil mass misread from the scale", "Ines Cardenas")
	holds(t, "test today", c.as("insp", "test", "today"), "TIME", "STATION", "RC", "LIMIT", "VERDICT", "min 95 %", "voided", "(retest of "+back+")")
	holds(t, "inspector's sync", c.as("insp", "sync"), "sent 11 entries (11 accepted", "received 0 entries from other devices")

	// The office reviews.
	holds(t, "office's second sync", c.as("office", "sync"), "received 11 entries from other devices")
	var queue []testJSONDecoded
	decode(t, c.as("office", "review", "queue", "--json"), &queue)
	if len(queue) != 7 { // eight tests less the voided one
		t.Errorf("review queue holds %d tests, want 7", len(queue))
	}
	holds(t, "approve", c.as("office", "review", "approve", ids["sand-cone"]), "approved")
	holds(t, "return", c.as("office", "review", "return", ids["wet-density"], "--comment", "no method named for the wet density; say how it was measured"),
		"returned to Ines Cardenas")
	c.as("office", "sync")

	// QA's reports, from QA's own copy of the ledger.
	c.as("qa", "sync")
	var audit []struct {
		Failed  testJSONDecoded
		Retests []testJSONDecoded
		Closure string
		Closed  bool
	}
	decode(t, c.as("qa", "qa", "audit", "--json"), &audit)
	if len(audit) != 1 || audit[0].Failed.ShortID != back || !audit[0].Closed || audit[0].Closure != "retested" || len(audit[0].Retests) != 1 {
		t.Errorf("qa audit: %+v", audit)
	}
	holds(t, "qa audit", c.as("qa", "qa", "audit"), back, "closed by a passing retest", "PASS")
	var freq []struct {
		Placement           string
		Required, Taken     int
		Shortfall           int
		Met                 bool
		CompactedVolume     float64 `json:"compacted_volume"`
		Spec, PlacementID   string
		Units               string
		ShortfallPlacements []string
	}
	decode(t, c.as("qa", "qa", "frequency", "--json"), &freq)
	if len(freq) != 1 || freq[0].Placement != "embankment lift 4" || freq[0].Required != 3 || freq[0].CompactedVolume != 296.3 {
		t.Errorf("qa frequency: %+v (296.3 yd3 at one test per 100 yd3 needs 3)", freq)
	}
	var lots []struct {
		Placement string
		N         int
		PWL       *float64
		LeftOut   []struct {
			Test, Reason string
			ReplacedBy   string `json:"replaced_by"`
		} `json:"left_out"`
		LeftOutCount int `json:"left_out_count"`
	}
	decode(t, c.as("qa", "qa", "lots", "--json"), &lots)
	if len(lots) != 1 || lots[0].N < 3 || lots[0].PWL == nil {
		t.Fatalf("qa lots: %+v", lots)
	}
	// Final tests only: the failure the retest closed, the test the office
	// returned and the voided test are left out, each with its reason.
	wantOut := map[string]string{back: "reworked_and_retested", ids["wet-density"]: "returned_by_office", balloon: "voided"}
	if lots[0].LeftOutCount != len(wantOut) || len(lots[0].LeftOut) != len(wantOut) {
		t.Errorf("qa lots left out %d: %+v, want %v", lots[0].LeftOutCount, lots[0].LeftOut, wantOut)
	}
	for _, o := range lots[0].LeftOut {
		if wantOut[o.Test] != o.Reason || (o.Reason == "reworked_and_retested") != (o.ReplacedBy == last.ShortID) {
			t.Errorf("qa lots left out %+v, want reason %q (a reworked test names its retest %s)", o, wantOut[o.Test], last.ShortID)
		}
	}
	holds(t, "qa lots", c.as("qa", "qa", "lots"), "embankment lift 4", "min 95 %", "PWL",
		"test "+back+": failed, reworked and replaced by a retest (retest "+last.ShortID+" counts in its place)",
		"test "+ids["wet-density"]+": returned by the office", "test "+balloon+": voided")
	var rows []struct {
		Scope               string
		Source              string  `json:"borrow_source"`
		CompactedVolume     float64 `json:"compacted_volume"`
		CompactedDryDensity float64 `json:"compacted_dry_density"`
		BankDryDensity      float64 `json:"bank_dry_density"`
		BankVolume          float64 `json:"bank_volume"`
		LooseHauled         float64 `json:"loose_hauled"`
		Units               string
	}
	decode(t, c.as("qa", "qa", "reconcile", "--json"), &rows)
	// One row per borrow source, then one per feature.
	if len(rows) != 2 || rows[0].Scope != "borrow_source" || rows[1].Scope != "feature" || rows[1].CompactedVolume != 296.3 {
		t.Fatalf("qa reconcile: %+v, want the borrow source's row and the feature's", rows)
	}
	if rec := rows[0]; rec.Source != "Quarry Hill pit" || rec.CompactedVolume != 296.3 || rec.BankDryDensity != 108.4 ||
		rec.LooseHauled != 504 || rec.Units != "us" || rec.BankVolume <= rec.CompactedVolume*0.9 {
		t.Errorf("qa reconcile of the borrow source: %+v", rec)
	}
	holds(t, "qa reconcile", c.as("qa", "qa", "reconcile"), "Quarry Hill pit", "504.0 yd3", "shrinkage = (bank volume - compacted volume) / bank volume")
	holds(t, "qa reconcile in si", c.as("qa", "qa", "reconcile", "--units", "si"), "m3", "kg/m3")

	// Export and verify the project's ledger.
	file := c.dir + "/cinder.tamp"
	holds(t, "export", c.as("qa", "export", "--out", file), `of project "Cinder Butte interchange" written`)
	holds(t, "verify", must(t, "verify", file), "ok: project "+c.project)
}

// recordedJSONDecoded is what tamp test record --json prints.
type recordedJSONDecoded struct {
	TestID   string `json:"test_id"`
	ShortID  string `json:"short_id"`
	RetestOf string `json:"retest_of"`
	Result   struct {
		Units              string
		Method             string
		DryDensity         float64  `json:"dry_density"`
		RelativeCompaction *float64 `json:"relative_compaction"`
		Verdict            string
		Limits             struct {
			SpecName      string `json:"spec_name"`
			MinCompaction string `json:"min_compaction"`
		}
	}
	Steps []struct {
		Name  string
		Value *float64
		Unit  string
	}
	Cautions []string
}

// testJSONDecoded is a test as the read commands print it with --json.
type testJSONDecoded struct {
	ID                   string
	ShortID              string `json:"short_id"`
	RecordedBy           string `json:"recorded_by"`
	Spec, Reference      string
	Placement, Equipment string
	Voided               bool
	ReviewStatus         string `json:"review_status"`
	Result               struct{ Verdict string }
	History              []struct{ By, Entry, Reason string }
}
