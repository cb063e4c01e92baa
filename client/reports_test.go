package client

import (
	"context"
	"math"
	"testing"
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
	var rcs []float64
	var drySum float64
	for _, dry := range []float64{112, 104, 113.5, 111} {
		r, err := e.store.RecordTest(ctx, TestInput{Project: e.project, Readings: sandCone(dry, 13), ReferenceID: e.ref, SpecID: spec,
			PlacementID: pad, Feature: "pad", LiftNumber: 2, Location: Location{Station: 120}})
		if err != nil {
			t.Fatal(err)
		}
		ids, rcs, drySum = append(ids, r.TestID), append(rcs, r.Result.RelativeCompaction), drySum+r.Result.DryDensity
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
	freq := e.store.Frequency(e.project)
	if len(freq) != 1 || freq[0].Placement.ID != pad || freq[0].SpecID != spec || freq[0].Tests != 4 || freq[0].Required != 6 ||
		freq[0].Shortfall != 2 || freq[0].Placement.CompactedVolume != 300 {
		t.Errorf("frequency: %+v, want 4 of 6 tests", freq)
	}
	lots, err := e.store.Lots(e.project)
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
	// With n = 4 the beta estimator is 100 (1/2 + Q / 3), capped at 100.
	q := (mean - 95) / lots[0].StdDev
	if len(lots) != 1 || lots[0].N != 4 || lots[0].LowerLimit != 95 || math.Abs(lots[0].Mean-mean) > 1e-9 ||
		math.Abs(lots[0].QualityIndex-q) > 1e-9 || math.Abs(lots[0].PWL-min(100, 100*(0.5+q/3))) > 1e-9 {
		t.Errorf("lots: %+v, want 4 final values of mean %.2f", lots, mean)
	}
	if lo := lots[0].LeftOut; len(lo) != 1 || lo[0] != (LeftOutTest{TestID: ids[1], Reason: LeftOutReworked, ReplacedBy: re.TestID}) {
		t.Errorf("lots left out %+v, want the failure %s replaced by %s", lo, ids[1], re.TestID)
	}
	bal, err := e.store.Reconcile(e.project)
	if err != nil {
		t.Fatal(err)
	}
	fill := drySum / 4
	if len(bal) != 1 || bal[0].BorrowSourceID != pit || bal[0].BorrowSource != "north pit" || bal[0].CompactedVolume != 300 || bal[0].Tests != 4 ||
		math.Abs(bal[0].FillDryDensity-fill) > 1e-9 || math.Abs(bal[0].BankVolume-300*fill/pcf(100)) > 1e-9 ||
		math.Abs(bal[0].LooseHauled-360) > 1e-9 || math.Abs(bal[0].LooseExpected-300*fill/pcf(84)) > 1e-9 || bal[0].ShrinkDefinition == "" {
		t.Errorf("reconciliation: %+v", bal)
	}
}
