package client

import (
	"context"
	"encoding/json"
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"tamp/internal/report"
)

// The reports come from the device's own copy of the ledger, with no
// server: the office's review queue, the QA manager's retest audit, test
// frequency, lots and the volume reconciliation.
func TestReportsOffline(t *testing.T) {
	e := newEnv(t, "quinn")
	ctx := context.Background()
	spec, err := e.store.DefineSpec(ctx, e.project, Spec{Name: "pad, 1 test per 50 m3", MinCompaction: "95", MoistureLow: "-2",
		MoistureHigh: "2", VolumePerTest: 50})
	if err != nil {
		t.Fatal(err)
	}
	pit, err := e.store.MeasureBorrowSource(ctx, e.project, BorrowSource{Name: "north pit", BankTests: []Readings{sandCone(100, 9)},
		LooseDryDensity: pcf(84)})
	if err != nil {
		t.Fatal(err)
	}
	e.as("olga")
	pad, err := e.store.RecordPlacement(ctx, e.project, Placement{Feature: "pad", LiftNumber: 2, Thickness: 0.25, CompactedVolume: 300,
		BorrowSourceID: pit, PlacedOn: "2026-09-14"})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := e.store.RecordHaul(ctx, e.project, Haul{BorrowSourceID: pit, Loads: 30, LooseVolumePerLoad: 12, PlacementID: pad}); err != nil {
		t.Fatal(err)
	}

	e.as("ines")
	var ids []string
	var rcs, dry []float64
	for _, d := range []float64{112, 104, 113.5, 111} {
		r, err := e.store.RecordTest(ctx, TestInput{Project: e.project, Readings: sandCone(d, 13), ReferenceID: e.ref, SpecID: spec,
			PlacementID: pad, Feature: "pad", LiftNumber: 2, Location: Location{Station: 120}})
		if err != nil {
			t.Fatal(err)
		}
		ids, rcs, dry = append(ids, r.TestID), append(rcs, r.Result.RelativeCompaction), append(dry, r.Result.DryDensity)
	}
	re, err := e.store.RecordRetest(ctx, e.project, ids[1], RetestInput{Readings: sandCone(112.5, 13), Location: &Location{Station: 123}})
	if err != nil {
		t.Fatal(err)
	}
	e.as("olga")
	if err := e.store.ReviewTest(ctx, e.project, ids[0], Approve, ""); err != nil {
		t.Fatal(err)
	}

	if q := e.store.ReviewQueue(e.project, ""); len(q) != 4 || q[0].ID != ids[1] || q[3].ID != re.TestID {
		t.Errorf("review queue: %d tests, want the 4 not approved, oldest first", len(q))
	}
	if q := e.store.ReviewQueue(e.project, "2026-09-13"); len(q) != 0 {
		t.Errorf("review queue of the day before: %d tests", len(q))
	}
	audit := e.store.RetestAudit(e.project)
	if len(audit) != 1 || audit[0].Failed.ID != ids[1] || len(audit[0].Retests) != 1 || audit[0].Retests[0].ID != re.TestID ||
		audit[0].Closure != ClosureRetested || audit[0].StationShift != 3 {
		t.Errorf("retest audit: %+v", audit)
	}
	// Final tests count toward frequency: the failure replaced by its
	// retest counts once, through the retest.
	freq := e.store.Frequency(e.project)
	wantRule := FrequencyRule{Kind: PerVolume, Per: 50, Quantity: 300, Required: 6, Applies: true}
	if len(freq) != 1 || freq[0].Placement.ID != pad || freq[0].SpecID != spec || freq[0].Taken != 4 || freq[0].Tests != freq[0].Taken ||
		freq[0].Required != 6 || freq[0].Shortfall != 2 || freq[0].Placement.CompactedVolume != 300 || len(freq[0].Rules) != 1 ||
		freq[0].Rules[0] != wantRule {
		t.Errorf("frequency: %+v, want 4 final tests of 6 by one rule %+v", freq, wantRule)
	}
	lots, err := e.store.Lots(e.project, LotScope{})
	if err != nil {
		t.Fatal(err)
	}
	if len(lots) != 1 {
		t.Fatalf("lots: %+v, want one", lots)
	}
	// Final tests only: the retest counts in place of the failure it closed.
	final := []float64{rcs[0], rcs[2], rcs[3], re.Result.RelativeCompaction}
	var mean float64
	for _, v := range final {
		mean += v / 4
	}
	// With n = 4 the beta estimator is 100 (1/2 + Q / 3), capped at 100
	// (CHECKS E6, [formula]).
	l := lots[0]
	q := (mean - 95) / l.StdDev
	if l.N != 4 || l.LowerLimit != 95 || math.Abs(l.Mean-mean) > 1e-9 || math.Abs(l.QualityIndex-q) > 1e-9 ||
		math.Abs(l.PWL-min(100, 100*(0.5+q/3))) > 1e-9 || !slices.Equal(l.Values, final) {
		t.Errorf("lot: %+v, want 4 final values of mean %.2f", l, mean)
	}
	if l.Name != "pad lift 2" || l.Feature != "pad" || l.Placement.ID != pad || l.SpecID != spec ||
		!slices.Equal(l.TestIDs, []string{ids[0], ids[2], ids[3], re.TestID}) || l.Acceptance != LotNoAcceptanceLimit || l.Why != "" {
		t.Errorf("lot %+v, want pad lift 2 of the 4 final tests, with no acceptance limit", l)
	}
	// Every final test is 0.5 points dry of optimum: s = 0 and the mean
	// inside the window, so all of the lot is within it.
	if m := l.Moisture; m == nil || m.Basis != PointsOfOptimum || *m.Lower != -2 || *m.Upper != 2 || m.N != 4 ||
		math.Abs(m.Mean+0.5) > 1e-9 || m.StdDev > 1e-9 || m.PWL != 100 || len(m.Values) != 4 {
		t.Errorf("lot moisture %+v, want 4 values 0.5 points dry, all within -2..+2", m)
	}
	wantOut := LeftOutTest{TestID: ids[1], Reason: LeftOutReworked, ReasonText: "failed, reworked and replaced by a retest", ReplacedBy: re.TestID}
	if lo := l.LeftOut; len(lo) != 1 || lo[0] != wantOut {
		t.Errorf("lots left out %+v, want %+v", lo, wantOut)
	}
	bal, err := e.store.Reconcile(e.project)
	if err != nil {
		t.Fatal(err)
	}
	// One row per borrow source, one per feature.
	var src, feat []VolumeBalance
	for _, b := range bal {
		switch b.Scope {
		case BorrowSourceScope:
			src = append(src, b)
		case FeatureScope:
			feat = append(feat, b)
		default:
			t.Errorf("reconciliation row of scope %q", b.Scope)
		}
	}
	// The fill's dry density is the mean of the final tests': the retest's
	// in place of the failure's.
	fill := (dry[0] + dry[2] + dry[3] + re.Result.DryDensity) / 4
	if len(src) != 1 || src[0].BorrowSourceID != pit || src[0].BorrowSource != "north pit" || src[0].CompactedVolume != 300 || src[0].Tests != 4 ||
		math.Abs(src[0].FillDryDensity-fill) > 1e-9 || math.Abs(src[0].BankVolume-300*fill/pcf(100)) > 1e-9 ||
		math.Abs(src[0].LooseHauled-360) > 1e-9 || math.Abs(src[0].LooseExpected-300*fill/pcf(84)) > 1e-9 || src[0].ShrinkDefinition == "" {
		t.Errorf("reconciliation of the borrow source: %+v", src)
	}
	if len(feat) != 1 || feat[0].Name != "pad" || feat[0].CompactedVolume != 300 || feat[0].Tests != 4 {
		t.Errorf("reconciliation of the feature: %+v, want pad with 300 m3 placed", feat)
	}
}

// The words of the report package are the client's: a report's kind,
// outcome or reason reaches an app under the same constant.
func TestReportWordsMatch(t *testing.T) {
	for r, c := range map[report.RuleKind]FrequencyRuleKind{report.VolumeRule: PerVolume, report.AreaRule: PerArea, report.LengthRule: PerLength,
		report.PerLiftRule: PerLift} {
		if FrequencyRuleKind(r) != c {
			t.Errorf("rule kind %q reaches apps as %q", r, c)
		}
	}
	for r, c := range map[report.Acceptance]LotAcceptance{report.Accepted: LotAccepted, report.Rejected: LotRejected,
		report.NoAcceptanceLimit: LotNoAcceptanceLimit, report.NotEstimated: LotNotEstimated} {
		if LotAcceptance(r) != c {
			t.Errorf("acceptance %q reaches apps as %q", r, c)
		}
	}
	reasons := map[report.Reason]string{report.ReworkedAndRetested: LeftOutReworked, report.ReturnedByOffice: LeftOutReturned,
		report.VoidedTest: LeftOutVoided, report.NotGraded: LeftOutNotGraded}
	if len(reasons) != len(report.ReasonText) {
		t.Errorf("%d reasons here, %d in the report", len(reasons), len(report.ReasonText))
	}
	for r, c := range reasons {
		if string(r) != c || report.ReasonText[r] == "" {
			t.Errorf("reason %q reaches apps as %q, text %q", r, c, report.ReasonText[r])
		}
	}
}

// Frequency applies every rule a spec sets, says why one does not apply,
// and counts final tests; lots follow their scope, estimate moisture
// against the window beside relative compaction, and judge the lot against
// the spec's acceptance limit.
func TestFrequencyRulesAndLotScopes(t *testing.T) {
	e := newEnv(t, "quinn")
	ctx := context.Background()
	spec, err := e.store.DefineSpec(ctx, e.project, Spec{Name: "embankment, by lots", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2",
		VolumePerTest: 200, AreaPerTest: 500, LengthPerTest: 50, MinTestsPerLift: 3, LotAcceptancePWL: 85})
	if err != nil {
		t.Fatal(err)
	}
	e.as("olga")
	// Lift 1 has stations and offsets: 120 m by 20 m, 0.3 m thick.
	lift1, err := e.store.RecordPlacement(ctx, e.project, Placement{Feature: "embankment", LiftNumber: 1, Thickness: 0.3, CompactedVolume: 720,
		Stations: &StationRange{From: 1000, To: 1120, OffsetLeft: -10, OffsetRight: 10}, PlacedOn: "2026-09-14", SpecID: spec})
	if err != nil {
		t.Fatal(err)
	}
	lift2, err := e.store.RecordPlacement(ctx, e.project, Placement{Feature: "embankment", LiftNumber: 2, Thickness: 0.3, CompactedVolume: 150,
		PlacedOn: "2026-09-15", SpecID: spec})
	if err != nil {
		t.Fatal(err)
	}

	e.as("ines")
	rec := func(placement, feature string, lift uint32, rc, dev float64) TestResult {
		t.Helper()
		e.clock.t = e.clock.t.Add(20 * time.Minute)
		// The reference's maximum is 116.0 pcf at 13.5 % optimum.
		r, err := e.store.RecordTest(ctx, TestInput{Project: e.project, Readings: sandCone(116.0*rc/100, 13.5+dev), ReferenceID: e.ref,
			SpecID: spec, PlacementID: placement, Feature: feature, LiftNumber: lift, Location: Location{Station: 1050}})
		if err != nil {
			t.Fatal(err)
		}
		return r
	}
	// Lift 1, the first day: relative compaction of CHECKS E4 and moisture
	// deviations of E5 ([formula]), and a test voided.
	rcs, devs := []float64{96.0, 97.5, 94.5, 98.0, 95.5}, []float64{-1.2, 0.4, 1.5, -0.3, 2.4}
	var one []string
	for i := range rcs {
		one = append(one, rec(lift1, "embankment", 1, rcs[i], devs[i]).TestID)
	}
	void := rec(lift1, "embankment", 1, 99, 0).TestID
	if err := e.store.VoidTest(ctx, e.project, void, "tested the ramp by mistake"); err != nil {
		t.Fatal(err)
	}
	// Lift 2, the next day: two passes and a failure retested; then lift 3
	// of no placement, and another feature.
	e.clock.t = e.clock.t.Add(24 * time.Hour)
	two := []string{rec(lift2, "embankment", 2, 97, 0).TestID, rec(lift2, "embankment", 2, 98, 0.5).TestID}
	failed := rec(lift2, "embankment", 2, 92, 0).TestID
	re, err := e.store.RecordRetest(ctx, e.project, failed, RetestInput{Readings: sandCone(116.0*0.99, 13.5)})
	if err != nil {
		t.Fatal(err)
	}
	three := rec("", "embankment", 3, 96, 1).TestID
	rec("", "shoulder", 1, 96, 1)

	freq := e.store.Frequency(e.project)
	if len(freq) != 2 {
		t.Fatalf("frequency: %+v, want lifts 1 and 2", freq)
	}
	// Lift 1: 720 m3 / 200 = 3.6 -> 4; 2,400 m2 / 500 = 4.8 -> 5;
	// 120 m / 50 = 2.4 -> 3; 3 per lift. The area asks the most.
	want1 := []FrequencyRule{{Kind: PerVolume, Per: 200, Quantity: 720, Required: 4, Applies: true},
		{Kind: PerArea, Per: 500, Quantity: 2400, Required: 5, Applies: true}, {Kind: PerLength, Per: 50, Quantity: 120, Required: 3, Applies: true},
		{Kind: PerLift, Per: 3, Quantity: 1, Required: 3, Applies: true}}
	if f := freq[0]; f.Placement.ID != lift1 || !slices.Equal(f.Rules, want1) || f.Required != 5 || f.Taken != 5 || f.Shortfall != 0 {
		t.Errorf("frequency of lift 1: %+v, want rules %+v, 5 of 5 (the voided test does not count)", f, want1)
	}
	// Lift 2 records a volume only: the area and length rules do not
	// apply. 150 m3 / 200 -> 1; 3 per lift. The failure and its retest
	// count once.
	f := freq[1]
	if f.Placement.ID != lift2 || f.Required != 3 || f.Taken != 3 || f.Shortfall != 0 || len(f.Rules) != 4 {
		t.Fatalf("frequency of lift 2: %+v, want 3 final tests of 3", f)
	}
	for i, kind := range []FrequencyRuleKind{PerVolume, PerArea, PerLength, PerLift} {
		r := f.Rules[i]
		applies := kind == PerVolume || kind == PerLift
		if r.Kind != kind || r.Applies != applies || (r.Why == "") != applies || (!applies && r.Required != 0) {
			t.Errorf("lift 2, rule %d: %+v, want %s applying=%v, with why when not", i, r, kind, applies)
		}
	}

	lots, err := e.store.Lots(e.project, LotScope{})
	if err != nil {
		t.Fatal(err)
	}
	if len(lots) != 2 || lots[0].Name != "embankment lift 1" || lots[1].Name != "embankment lift 2" {
		t.Fatalf("lots per lift: %+v, want lifts 1 and 2 (no lot of a test without a placement)", lots)
	}
	// E4: mean 96.3, s 1.4405, Q_L 0.9025, PWL 80.70; E5: PWL 83.93
	// ([formula], CHECKS E4 and E5).
	l := lots[0]
	if !slices.Equal(l.TestIDs, one) || l.N != 5 || math.Abs(l.Mean-96.3) > 0.05 || math.Abs(l.StdDev-1.4405) > 0.0005 ||
		math.Abs(l.QualityIndex-0.9025) > 0.0005 || math.Abs(l.PWL-80.70) > 0.05 {
		t.Errorf("lot of lift 1: %+v, want E4's mean 96.3, s 1.4405, Q 0.9025, PWL 80.70", l)
	}
	if m := l.Moisture; m == nil || m.N != 5 || math.Abs(m.Mean-0.56) > 1e-9 || math.Abs(m.PWL-83.93) > 0.05 {
		t.Errorf("moisture of lift 1: %+v, want E5's PWL 83.93", m)
	}
	if l.Acceptance != LotRejected || l.AcceptancePWL != 85 || !strings.Contains(l.Why, "relative compaction is 80.7 % within limits") ||
		!strings.Contains(l.Why, "moisture is 83.9 % within limits") {
		t.Errorf("lift 1: %s (%s), want rejected below 85 on both", l.Acceptance, l.Why)
	}
	if lo := l.LeftOut; len(lo) != 1 || lo[0] != (LeftOutTest{TestID: void, Reason: LeftOutVoided, ReasonText: "voided"}) {
		t.Errorf("left out of lift 1: %+v, want the voided test", lo)
	}
	l = lots[1]
	if !slices.Equal(l.TestIDs, append(slices.Clone(two), re.TestID)) || l.Acceptance != LotAccepted || l.Why != "" || l.PWL < 85 ||
		len(l.LeftOut) != 1 || l.LeftOut[0].TestID != failed || l.LeftOut[0].ReplacedBy != re.TestID {
		t.Errorf("lot of lift 2: %+v, want accepted, the failure left out for its retest", l)
	}

	day1, day2 := "2026-09-14", "2026-09-15"
	for _, c := range []struct {
		name  string
		scope LotScope
		lot   string
		tests []string
	}{
		{"the feature", LotScope{Feature: "embankment"}, "embankment", slices.Concat(one, two, []string{re.TestID, three})},
		{"one lift", LotScope{Feature: "embankment", LiftFrom: 1, LiftTo: 1}, "embankment lift 1", one},
		{"lifts from 2", LotScope{Feature: "embankment", LiftFrom: 2}, "embankment lifts 2 and above", slices.Concat(two, []string{re.TestID, three})},
		{"lifts 2-3 on the second day", LotScope{Feature: "embankment", LiftFrom: 2, LiftTo: 3, DayFrom: day2, DayTo: day2},
			"embankment lifts 2–3, " + day2, slices.Concat(two, []string{re.TestID, three})},
		{"up to the first day", LotScope{Feature: "embankment", DayTo: day1}, "embankment, up to " + day1, one},
		{"another feature", LotScope{Feature: "shoulder", LiftTo: 1}, "shoulder lifts up to 1", nil},
	} {
		lots, err := e.store.Lots(e.project, c.scope)
		if err != nil {
			t.Errorf("%s: %v", c.name, err)
			continue
		}
		if len(lots) != 1 || lots[0].Name != c.lot || lots[0].Placement.ID != "" || lots[0].SpecID != spec || len(lots[0].TestIDs) != max(len(c.tests), 1) ||
			c.tests != nil && !slices.Equal(lots[0].TestIDs, c.tests) {
			t.Errorf("%s: %+v, want one lot %q of %d tests", c.name, lots, c.lot, len(c.tests))
		}
	}
	// The one test of the shoulder: too few for an estimate.
	if sh, _ := e.store.Lots(e.project, LotScope{Feature: "shoulder"}); len(sh) != 1 || sh[0].Acceptance != LotNotEstimated || sh[0].N != 0 ||
		sh[0].Moisture == nil || sh[0].Moisture.N != 0 || !strings.Contains(sh[0].Why, "too few results") {
		t.Errorf("lot of one test: %+v, want not estimated, too few results", sh)
	}
	if none, err := e.store.Lots(e.project, LotScope{Feature: "embankment", DayFrom: "2026-09-16"}); err != nil || len(none) != 0 {
		t.Errorf("lots after the last day: %+v, %v; want none", none, err)
	}

	for _, c := range []struct {
		name  string
		scope LotScope
		field string
	}{
		{"lifts without a feature", LotScope{LiftFrom: 2}, "feature"},
		{"the first lift above the last", LotScope{Feature: "embankment", LiftFrom: 5, LiftTo: 2}, "lift_from"},
		{"a day written otherwise", LotScope{Feature: "embankment", DayFrom: "14/09/2026"}, "day_from"},
		{"the first day after the last", LotScope{Feature: "embankment", DayFrom: day2, DayTo: day1}, "day_from"},
	} {
		_, err := e.store.Lots(e.project, c.scope)
		wantField(t, c.name, err, c.field)
	}
}

// The apps' JSON of frequency and lots (client/mobile's schema) keeps the
// names it had, beside those added.
func TestReportJSONKeepsItsNames(t *testing.T) {
	for _, c := range []struct {
		v    any
		keys []string
	}{
		{Frequency{}, []string{"placement", "spec_id", "tests", "required", "shortfall", "rules", "taken"}},
		{Lot{Moisture: &MoistureQuality{}}, []string{"placement", "spec_id", "values", "n", "mean", "std_dev", "lower_limit", "quality_index", "pwl",
			"left_out", "name", "feature", "test_ids", "moisture", "acceptance", "acceptance_pwl", "why"}},
		{LeftOutTest{ReplacedBy: "x"}, []string{"test_id", "reason", "replaced_by", "reason_text"}},
	} {
		b, err := json.Marshal(c.v)
		if err != nil {
			t.Fatal(err)
		}
		var m map[string]json.RawMessage
		if err := json.Unmarshal(b, &m); err != nil {
			t.Fatal(err)
		}
		for _, k := range c.keys {
			if _, ok := m[k]; !ok {
				t.Errorf("%T: no %q in %s", c.v, k, b)
			}
		}
	}
}
