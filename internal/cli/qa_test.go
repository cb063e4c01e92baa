package cli

import (
	"strconv"
	"strings"
	"testing"
	"time"
)

// oneLine is the line of out that starts with prefix, its runs of spaces
// (a table's padding) made one.
func oneLine(t *testing.T, out, prefix string) string {
	t.Helper()
	for _, l := range strings.Split(out, "\n") {
		if strings.HasPrefix(l, prefix) {
			return strings.Join(strings.Fields(l), " ")
		}
	}
	t.Errorf("no line starting %q in\n%s", prefix, out)
	return ""
}

// QA's frequency and lots against a real tampd: every frequency rule in
// words, final tests counted once, lots per lift and per feature scope, the
// percent within limits of relative compaction and of moisture checked
// against hand computations, acceptance in words, and bad flags refused.
func TestQAFrequencyAndLots(t *testing.T) {
	c := newCrew(t, "Sagebrush Flats levee", "us")
	c.member("qa", "Quinn Ashby", "qa")
	c.member("office", "Otto Brandt", "office")
	c.member("insp", "Ines Cardenas", "inspector")

	c.as("qa", "spec", "add", "--name", "levee", "--min-rc", "95", "--moisture-window", "-2,2", "--volume-per-test", "100",
		"--area-per-test", "2000", "--length-per-test", "200", "--min-per-lift", "3", "--lot-pwl", "85")
	c.as("qa", "reference", "add", "--sample", "L-7", "--material", "grey lean clay", "--standard", "D698", "--method", "A",
		"--mdd", "116.0", "--omc", "12.0")
	c.as("qa", "sync")
	c.as("office", "sync")
	// Lift 1: 400 ft by 30 ft, 9 in thick: 12,000 ft2 and 333.3 yd3.
	// Lift 2: a volume only, no stations.
	c.as("office", "placement", "add", "--feature", "levee", "--lift", "1", "--from", "10+00", "--to", "14+00", "--left", "15", "--right", "15",
		"--thickness", "9", "--spec", "levee")
	c.as("office", "placement", "add", "--feature", "levee", "--lift", "2", "--volume", "250", "--thickness", "8", "--spec", "levee")
	c.as("office", "sync")
	c.as("insp", "sync")

	// rec records a wet-density test of relative compaction rc and moisture
	// dev points from optimum (116.0 pcf at 12.0 %).
	rec := func(lift, station string, rc, dev float64) string {
		t.Helper()
		w := 12.0 + dev
		wet := 116.0 * rc / 100 * (1 + w/100)
		var r recordedJSONDecoded
		decode(t, c.as("insp", "test", "record", "--json", "--method", "wet-density", "--wet-density", strconv.FormatFloat(wet, 'f', -1, 64),
			"--moisture", strconv.FormatFloat(w, 'f', -1, 64), "--station", station, "--feature", "levee", "--lift", lift, "--spec", "levee",
			"--reference", "L-7"), &r)
		return r.ShortID
	}
	// Lift 1: relative compaction of CHECKS E4 and moisture deviations of
	// E5, and a test voided.
	rcs, devs := []float64{96.0, 97.5, 94.5, 98.0, 95.5}, []float64{-1.2, 0.4, 1.5, -0.3, 2.4}
	for i := range rcs {
		rec("1", "1"+strconv.Itoa(i)+"+50", rcs[i], devs[i])
	}
	voided := rec("1", "13+80", 99, 0)
	c.as("insp", "test", "void", voided, "--reason", "tested the access ramp by mistake")
	// Lift 2: two passes, a failure retested, and a test the office returns;
	// then a test of lift 3, which has no placement.
	rec("2", "11+00", 97, 0)
	rec("2", "12+00", 98, 0.5)
	failed := rec("2", "13+00", 92, 0)
	var retest testJSONDecoded
	c.as("insp", "test", "retest", failed, "--wet-density", strconv.FormatFloat(116.0*0.99*1.12, 'f', -1, 64), "--moisture", "12.0")
	decode(t, c.as("insp", "test", "show", "last", "--json"), &retest)
	returned := rec("2", "13+50", 97.5, 0)
	rec("3", "12+50", 96, 1)
	var shown struct{ Day string }
	decode(t, c.as("insp", "test", "show", returned, "--json"), &shown)
	c.as("insp", "sync")
	c.as("office", "sync")
	c.as("office", "review", "return", returned, "--comment", "no gauge named; say what measured the wet density")
	c.as("office", "sync")
	c.as("qa", "sync")

	// Frequency. Lift 1: 333.3 yd3 / 100 -> 4; 12,000 ft2 / 2,000 -> 6;
	// 400 ft / 200 -> 2; 3 per lift. Five final tests: the voided one does
	// not count. Lift 2: 250 yd3 / 100 -> 3; 3 per lift; the failure and
	// its retest count once and the returned test not at all.
	out := c.as("qa", "qa", "frequency")
	if got, want := oneLine(t, out, "levee lift 1"),
		"levee lift 1 levee 1 per 100 yd3 (4); 1 per 2,000 ft2 (6); 1 per 200 ft (2); 3 per lift (3) 6 5 1 SHORT"; got != want {
		t.Errorf("qa frequency, lift 1:\n%s\nwant\n%s", got, want)
	}
	if got, want := oneLine(t, out, "levee lift 2"), "levee lift 2 levee 1 per 100 yd3 (3); 3 per lift (3) 3 3 0 met"; got != want {
		t.Errorf("qa frequency, lift 2:\n%s\nwant\n%s", got, want)
	}
	holds(t, "qa frequency", out, "TAKEN (FINAL)",
		`Not applied: levee lift 2, spec "levee": 1 per 2,000 ft2 does not apply: the placement records neither an area nor stations`,
		`Not applied: levee lift 2, spec "levee": 1 per 200 ft does not apply: the placement records no stations`,
		"a failure replaced by its retest counts once")
	type ruleDecoded struct {
		Kind, Rule, Unit, Why string
		Per, Quantity         *float64
		Required              int
		Applies               bool
	}
	var freq []struct {
		Placement                 string
		Required, Taken           int
		Shortfall                 int
		Met                       bool
		CompactedVolume           float64 `json:"compacted_volume"`
		Rules                     []ruleDecoded
		Spec, PlacementID, SpecID string
		Units                     string
	}
	decode(t, c.as("qa", "qa", "frequency", "--json"), &freq)
	if len(freq) != 2 || freq[0].Taken != 5 || freq[0].Required != 6 || freq[0].Shortfall != 1 || freq[0].Met || freq[0].CompactedVolume != 333.3 ||
		freq[1].Taken != 3 || freq[1].Required != 3 || !freq[1].Met || freq[0].Units != "us" || len(freq[0].Rules) != 4 || len(freq[1].Rules) != 4 {
		t.Fatalf("qa frequency --json: %+v", freq)
	}
	for i, want := range []struct {
		kind, rule, unit string
		per, quantity    float64
		required         int
	}{{"volume", "1 per 100 yd3", "yd3", 100, 333.3, 4}, {"area", "1 per 2,000 ft2", "ft2", 2000, 12000, 6},
		{"length", "1 per 200 ft", "ft", 200, 400, 2}, {"per_lift", "3 per lift", "", 3, 1, 3}} {
		r := freq[0].Rules[i]
		if r.Kind != want.kind || r.Rule != want.rule || r.Unit != want.unit || r.Per == nil || *r.Per != want.per || r.Quantity == nil ||
			*r.Quantity != want.quantity || r.Required != want.required || !r.Applies {
			t.Errorf("qa frequency --json, lift 1 rule %d: %+v, want %+v", i, r, want)
		}
	}
	if r := freq[1].Rules[1]; r.Applies || r.Quantity != nil || r.Required != 0 || r.Why == "" {
		t.Errorf("qa frequency --json, lift 2's area rule: %+v, want not applying, with why", r)
	}
	// In SI: 100 yd3 = 76.5 m3, 2,000 ft2 = 185.8 m2, 200 ft = 60.96 m
	// (the international foot, CHECKS A8 [pub]).
	decode(t, c.as("qa", "qa", "frequency", "--json", "--units", "si"), &freq)
	if r := freq[0].Rules; len(r) != 4 || *r[0].Per != 76.5 || r[0].Rule != "1 per 76.5 m3" || *r[1].Per != 185.8 || r[1].Rule != "1 per 185.8 m2" ||
		*r[2].Per != 60.96 || r[2].Rule != "1 per 60.96 m" || freq[0].Units != "si" {
		t.Errorf("qa frequency --json --units si: %+v", r)
	}

	// Lots per lift. Lift 1, E4 ([formula]): mean 96.3, s 1.4405, Q 0.9025,
	// PWL 80.70; E5 ([formula]): moisture PWL 83.93. Both below 85:
	// rejected. Lift 2: 97, 98, 99 and moisture within a point: accepted.
	type lotDecoded struct {
		Name, Feature, Placement, Spec string
		Tests                          []string
		N                              int
		Mean, PWL                      *float64
		StdDev                         *float64 `json:"std_dev"`
		QualityIndex                   *float64 `json:"quality_index"`
		Moisture                       *struct {
			Basis        string
			Lower, Upper *float64
			N            int
			PWL          *float64
		}
		Acceptance     string
		AcceptanceText string `json:"acceptance_text"`
		Why            string
		LeftOut        []struct {
			Test, Reason string
			ReasonText   string `json:"reason_text"`
			ReplacedBy   string `json:"replaced_by"`
		} `json:"left_out"`
	}
	var lots []lotDecoded
	decode(t, c.as("qa", "qa", "lots", "--json"), &lots)
	if len(lots) != 2 {
		t.Fatalf("qa lots --json: %+v, want lifts 1 and 2", lots)
	}
	l := lots[0]
	if l.Name != "levee lift 1" || l.Placement != "levee lift 1" || l.N != 5 || l.Mean == nil || *l.Mean != 96.3 || *l.StdDev != 1.44 ||
		*l.QualityIndex != 0.90 || *l.PWL != 80.7 {
		t.Errorf("qa lots --json, lift 1: %+v, want E4's 5 tests, mean 96.3, s 1.44, Q 0.90, PWL 80.7", l)
	}
	if m := l.Moisture; m == nil || m.Basis != "points_of_optimum" || *m.Lower != -2 || *m.Upper != 2 || m.N != 5 || m.PWL == nil || *m.PWL != 83.9 {
		t.Errorf("qa lots --json, lift 1 moisture: %+v, want E5's PWL 83.9", m)
	}
	if l.Acceptance != "rejected" || l.AcceptanceText != "REJECTED" || len(l.LeftOut) != 1 || l.LeftOut[0].Test != voided ||
		l.LeftOut[0].Reason != "voided" || l.LeftOut[0].ReasonText != "voided" {
		t.Errorf("qa lots --json, lift 1: %+v, want rejected, the voided test left out", l)
	}
	l = lots[1]
	if l.Name != "levee lift 2" || l.N != 3 || l.Acceptance != "accepted" || l.AcceptanceText != "accepted (PWL ≥ 85)" || len(l.LeftOut) != 2 ||
		!strings.HasSuffix(l.Tests[2], retest.ShortID) {
		t.Errorf("qa lots --json, lift 2: %+v, want 3 final tests, accepted", l)
	}
	for _, o := range l.LeftOut {
		if !(o.Test == failed && o.Reason == "reworked_and_retested" && o.ReplacedBy == retest.ShortID) &&
			!(o.Test == returned && o.Reason == "returned_by_office" && o.ReasonText == "returned by the office" && o.ReplacedBy == "") {
			t.Errorf("qa lots --json, left out of lift 2: %+v, want %s replaced by %s and %s returned", o, failed, retest.ShortID, returned)
		}
	}
	out = c.as("qa", "qa", "lots")
	if got, want := oneLine(t, out, "levee lift 1"), "levee lift 1 levee 5 96.3 % 1.44 % min 95 % 80.7 % 83.9 % REJECTED"; got != want {
		t.Errorf("qa lots, lift 1:\n%s\nwant\n%s", got, want)
	}
	if got, want := oneLine(t, out, "levee lift 2"), "levee lift 2 levee 3 98.0 % 1.00 % min 95 % 100.0 % 100.0 % accepted (PWL ≥ 85)"; got != want {
		t.Errorf("qa lots, lift 2:\n%s\nwant\n%s", got, want)
	}
	holds(t, "qa lots", out, "PWL RC", "PWL MOISTURE",
		"Rejected: levee lift 1: relative compaction is 80.7 % within limits and moisture is 83.9 % within limits, below the 85 % the spec requires.",
		"Left out of levee lift 1: test "+voided+": voided",
		"Left out of levee lift 2: test "+failed+": failed, reworked and replaced by a retest (retest "+retest.ShortID+" counts in its place)",
		"Left out of levee lift 2: test "+returned+": returned by the office", "review by qualified personnel")

	// Lots of a feature scope: the test of lift 3 joins by its own lift.
	day, err := time.Parse(time.DateOnly, shown.Day)
	if err != nil {
		t.Fatalf("test show --json day %q: %v", shown.Day, err)
	}
	before := day.AddDate(0, 0, -1).Format(time.DateOnly)
	for _, sc := range []struct {
		args []string
		name string
		n    int
	}{
		{[]string{"--feature", "levee"}, "levee", 9},
		{[]string{"--feature", "levee", "--lifts", "1"}, "levee lift 1", 5},
		{[]string{"--feature", "levee", "--lifts", "2-3"}, "levee lifts 2–3", 4},
		{[]string{"--feature", "levee", "--lifts", "2-"}, "levee lifts 2 and above", 4},
		{[]string{"--feature", "levee", "--from", shown.Day, "--to", shown.Day}, "levee, " + shown.Day, 9},
	} {
		var got []lotDecoded
		decode(t, c.as("qa", append([]string{"qa", "lots", "--json"}, sc.args...)...), &got)
		if len(got) != 1 || got[0].Name != sc.name || got[0].N != sc.n || len(got[0].Tests) != sc.n || got[0].Placement != "" || got[0].Feature != "levee" {
			t.Errorf("qa lots %s: %+v, want one lot %q of %d final tests", strings.Join(sc.args, " "), got, sc.name, sc.n)
		}
	}
	var got []lotDecoded
	decode(t, c.as("qa", "qa", "lots", "--json", "--feature", "levee", "--lifts", "1"), &got)
	if len(got) != 1 || *got[0].PWL != 80.7 || got[0].Moisture == nil || *got[0].Moisture.PWL != 83.9 {
		t.Errorf("qa lots --feature levee --lifts 1: %+v, want lift 1's estimates", got)
	}
	holds(t, "qa lots of days before", c.as("qa", "qa", "lots", "--feature", "levee", "--to", before), "No lot", `"levee"`)

	for _, bad := range []struct {
		args []string
		want string
	}{
		{[]string{"--feature", "levee", "--lifts", "5-2"}, "--lifts 5-2: the first lift must not be above the last"},
		{[]string{"--feature", "levee", "--lifts", "two"}, `--lifts "two": write the lifts as FIRST-LAST`},
		{[]string{"--feature", "levee", "--lifts", "0-3"}, "lifts are numbered from 1"},
		{[]string{"--lifts", "1-2"}, "--lifts: give --feature too"},
		{[]string{"--to", shown.Day}, "--to: give --feature too"},
		{[]string{"--feature", "levee", "--from", "2031-13-01"}, `--from "2031-13-01": write the date as YYYY-MM-DD`},
		{[]string{"--feature", "levee", "--from", shown.Day, "--to", before}, "--from " + shown.Day + ": the first day must not be after the last"},
		{[]string{"--feature", "levy"}, `--feature "levy": no placement or test of that feature on this device (features: levee)`},
	} {
		holds(t, "qa lots "+strings.Join(bad.args, " "), c.fails("qa", append([]string{"qa", "lots"}, bad.args...)...), bad.want)
	}
}
