package client

import (
	"context"
	"errors"
	"math"
	"testing"
	"time"

	"tamp/internal/ledger"
	"tamp/internal/soil"
)

// as reopens the env's store for another user of the same device.
func (e *env) as(user string) {
	e.t.Helper()
	e.store.Close()
	e.open(user)
}

// wantField checks that err is an *EntryError of an invalid value, naming
// field.
func wantField(t *testing.T, what string, err error, field string) {
	t.Helper()
	wantEntryError(t, what, err, ErrInvalid, "", field, "")
}

// wantEntryError checks that err is an *EntryError that matches target and
// gives reason (any but permission_denied when empty), field and rule.
func wantEntryError(t *testing.T, what string, err, target error, reason, field, rule string) {
	t.Helper()
	var ee *EntryError
	if !errors.Is(err, target) || !errors.As(err, &ee) {
		t.Errorf("%s: %v (%T), want an *EntryError matching %v", what, err, err, target)
		return
	}
	if reason == "" && ee.Reason == "permission_denied" || reason != "" && ee.Reason != reason || ee.Field != field || ee.Rule != rule {
		t.Errorf("%s: reason %q, field %q, rule %q; want reason %q, field %q, rule %q", what, ee.Reason, ee.Field, ee.Rule, reason, field, rule)
	}
	if ee.Message == "" {
		t.Errorf("%s: the error has no message for the user", what)
	}
}

// Every entry a role makes goes through a typed method, makes the record's
// id when it is left empty, and reaches the project's view at once.
func TestEveryEntryThroughTypedMethods(t *testing.T) {
	e := newEnv(t, "quinn") // QA and office work; the inspector comes later
	ctx := context.Background()
	v := func() *ledger.Projection {
		e.store.mu.Lock()
		defer e.store.mu.Unlock()
		return e.store.view(e.project)
	}

	if su := v().SetUp(); su == nil || su.Name != "Juniper Wash detention basin" || su.Units != soil.US || su.TimeZone != "America/Denver" {
		t.Errorf("set-up in the view: %+v", su)
	}
	freq, err := e.store.DefineSpec(ctx, e.project, Spec{Name: "pad, 1 test per 50 m3", MinCompaction: "95", MoistureBasis: PercentOfOptimum,
		MoistureLow: "90", MoistureHigh: "115", VolumePerTest: 50})
	if err != nil {
		t.Fatal(err)
	}
	if sp, ok := v().Spec(freq); !ok || sp.VolumePerTest != 50 || sp.MoistureHigh != "115" {
		t.Errorf("spec %s in the view: %+v", freq, sp)
	}
	curve, err := e.store.AddReference(ctx, e.project, Reference{Material: "grey silt", LabSampleID: "L-220", Standard: AASHTOT180, Method: "C",
		Edition: 2017, SpecificGravity: 2.68, Points: []CurvePoint{{9, 1900}, {11, 1960}, {13, 1985}, {15, 1955}, {17, 1890}}})
	if err != nil {
		t.Fatal(err)
	}
	if r, ok := v().Reference(curve); !ok || r.MaxDry < 1980 || r.MaxDry > 1995 || r.Procedure.Standard != soil.AASHTOT180 || r.Gs != 2.68 {
		t.Errorf("reference fitted to its points: %+v", r)
	}
	gauge, err := e.store.RegisterEquipment(ctx, e.project, Equipment{Kind: NuclearGaugeEquipment, Model: "MD-9", SerialNumber: "G-5120",
		CalibrationDue: "2027-03-01"})
	if err != nil {
		t.Fatal(err)
	}
	corr, err := e.store.SetMoistureCorrection(ctx, e.project, MoistureCorrection{EquipmentID: gauge, ReferenceID: e.ref, Kind: OffsetCorrection,
		Value: 1.5, Pairs: []MoisturePair{{Gauge: 10.2, Oven: 11.8}, {Gauge: 12.0, Oven: 13.4}}})
	if err != nil {
		t.Fatal(err)
	}
	bank := sandCone(100, 9)
	pit, err := e.store.MeasureBorrowSource(ctx, e.project, BorrowSource{Name: "north pit", BankTests: []Readings{bank, sandCone(102, 9)},
		LooseDryDensity: pcf(84), ReferenceID: e.ref})
	if err != nil {
		t.Fatal(err)
	}
	pad, err := e.store.RecordPlacement(ctx, e.project, Placement{Feature: "pad", LiftNumber: 4, Stations: &StationRange{From: 100, To: 160},
		Area: 1200, Thickness: 0.25, CompactedVolume: 300, BorrowSourceID: pit, PlacedOn: "2026-09-14"})
	if err != nil {
		t.Fatal(err)
	}
	haul, err := e.store.RecordHaul(ctx, e.project, Haul{BorrowSourceID: pit, Loads: 30, LooseVolumePerLoad: 12, PlacementID: pad, HauledOn: "2026-09-14"})
	if err != nil {
		t.Fatal(err)
	}
	snap := v().Snapshot()
	if len(snap.Corrections) != 1 || snap.Corrections[0].ID != corr || snap.Corrections[0].Correction.Value != 1.5 || len(snap.Corrections[0].Pairs) != 2 {
		t.Errorf("corrections: %+v", snap.Corrections)
	}
	if len(snap.BorrowSource) != 1 || snap.BorrowSource[0].ID != pit || math.Abs(snap.BorrowSource[0].BankDryDensity-pcf(101)) > 0.01 {
		t.Errorf("borrow sources: %+v, want a bank dry density of 101 pcf", snap.BorrowSource)
	}
	if len(snap.Placements) != 1 || snap.Placements[0].ID != pad || snap.Placements[0].Stations.To != 160 {
		t.Errorf("placements: %+v", snap.Placements)
	}
	if len(snap.Hauls) != 1 || snap.Hauls[0].ID != haul || snap.Hauls[0].Loads != 30 {
		t.Errorf("hauls: %+v", snap.Hauls)
	}
	for _, id := range []string{freq, curve, gauge, corr, pit, pad, haul} {
		if len(id) != 36 {
			t.Errorf("made id %q is not a UUID", id)
		}
	}

	// The inspector's standard count and a gauge test with the correction.
	e.as("ines")
	if err := e.store.RecordStandardCount(ctx, e.project, StandardCount{EquipmentID: gauge, Date: "2026-09-14", DensityCount: 2790,
		MoistureCount: 655, Accepted: true}); err != nil {
		t.Fatal(err)
	}
	if eq, _ := v().Equipment(gauge); len(eq.Counts) != 1 || !eq.CountAcceptedOn("2026-09-14") {
		t.Errorf("standard counts of the gauge: %+v", eq.Counts)
	}
	r, err := e.store.RecordTest(ctx, TestInput{Project: e.project, ReferenceID: e.ref, SpecID: e.spec, EquipmentID: gauge, PlacementID: pad,
		Readings: Readings{Nuclear: &NuclearGauge{ProbeDepth: 0.15, CorrectionID: corr, Readings: []GaugeReading{
			{WetDensity: pcf(125), WaterPerVolume: pcf(12)}, {WetDensity: pcf(126), WaterPerVolume: pcf(12.2)}}}}})
	if err != nil {
		t.Fatal(err)
	}
	// Gauge moisture 12.1 / (125.5 - 12.1) = 10.67 %, plus 1.5 points.
	if w := r.Result.Moisture; math.Abs(w-(100*12.1/(125.5-12.1)+1.5)) > 1e-9 || r.Result.Method != NuclearDirect {
		t.Errorf("corrected moisture %v (%s), want 12.17 %%", w, r.Result.Method)
	}
	if len(r.Flags) != 0 || len(r.Missing) != 0 {
		t.Errorf("a calibrated, counted gauge with its correction: flags %v, missing %v", r.Flags, r.Missing)
	}

	// The office returns it with a comment, then approves the correction.
	e.as("olga")
	wantField(t, "a return without a comment", e.store.ReviewTest(ctx, e.project, r.TestID, Return, " "), "comment")
	if err := e.store.ReviewTest(ctx, e.project, r.TestID, Return, "count sheet missing"); err != nil {
		t.Fatal(err)
	}
	tt, _ := e.store.Test(e.project, r.TestID)
	if tt.ReviewStatus != Returned || len(tt.Reviews) != 1 || tt.Reviews[0].Decision != Return || tt.Reviews[0].Comment != "count sheet missing" ||
		tt.Reviews[0].Author != "olga" || tt.Reviews[0].Revision != tt.Current {
		t.Errorf("after the return: %s, reviews %+v", tt.ReviewStatus, tt.Reviews)
	}
	if err := e.store.ReviewTest(ctx, e.project, e.store.NewID(), Approve, ""); !errors.Is(err, ErrNotFound) {
		t.Errorf("a review of a test the device does not hold: %v", err)
	}
	wantEntryError(t, "an exception without a reason", e.store.AcceptException(ctx, e.project, r.TestID, ""),
		ErrReasonRequired, "invalid_field", "reason", "")
	if err := e.store.ReviewTest(ctx, e.project, r.TestID, Approve, ""); err != nil {
		t.Fatal(err)
	}
	if tt, _ := e.store.Test(e.project, r.TestID); tt.ReviewStatus != Approved || len(tt.Reviews) != 2 {
		t.Errorf("after the approval: %s, %d reviews", tt.ReviewStatus, len(tt.Reviews))
	}

	// A record id belongs to its first recorder.
	_, err = e.store.DefineSpec(ctx, e.project, Spec{ID: freq, Name: "again", MinCompaction: "90"})
	wantEntryError(t, "a spec id defined again", err, ErrInvalid, "conflicting_id", "record_id", "")
}

// Bad input is refused naming the field and the rule, and nothing is
// stored.
func TestEntriesRefuseBadInputNamingTheField(t *testing.T) {
	e := newEnv(t, "quinn")
	ctx := context.Background()
	before, _ := e.store.Outbox(ctx)
	_, err := e.store.DefineSpec(ctx, e.project, Spec{Name: "pad", MinCompaction: "ninety-five"})
	wantField(t, "a minimum compaction in words", err, "min_compaction")
	_, err = e.store.AddReference(ctx, e.project, Reference{Material: "silt", Standard: "ASTM D0000", Method: "A", MaxDryDensity: 1900, OptimumMoisture: 12})
	wantField(t, "an unknown standard", err, "standard")
	_, err = e.store.RegisterEquipment(ctx, e.project, Equipment{Kind: "theodolite", SerialNumber: "T-1"})
	wantField(t, "an unknown kind of equipment", err, "kind")
	_, err = e.store.RecordPlacement(ctx, e.project, Placement{Feature: "pad", Thickness: -0.2, CompactedVolume: 100})
	wantField(t, "a negative lift thickness", err, "thickness")
	_, err = e.store.MeasureBorrowSource(ctx, e.project, BorrowSource{Name: "pit"})
	wantField(t, "a borrow source without bank tests", err, "bank_tests")
	_, err = e.store.RecordHaul(ctx, e.project, Haul{BorrowSourceID: e.store.NewID(), Loads: 3, LooseVolumePerLoad: 10, HauledOn: "14/09/2026"})
	wantField(t, "a haul dated in another form", err, "hauled_on")
	wantField(t, "units in another word", e.store.SetUpProject(ctx, e.project, ProjectSetUp{Name: "x", Units: "metric"}), "units")
	wantField(t, "a review decision in another word", e.store.ReviewTest(ctx, e.project, e.store.NewID(), "reject", "no"), "decision")
	_, err = e.store.RecordTest(ctx, TestInput{Project: e.project, Readings: Readings{WetDensity: &MeasuredDensity{WetDensity: 9000, Moisture: 10}}})
	wantField(t, "an impossible wet density", err, "readings.wet_density")
	if after, _ := e.store.Outbox(ctx); after.Pending != before.Pending {
		t.Errorf("refused entries were stored: %d pending, want %d", after.Pending, before.Pending)
	}
}

// A test read back carries its whole history: revisions with their
// reasons and authors, voids, reviews, exceptions, the retests that follow
// it, its flags, the limits it was graded against and the arithmetic.
func TestTestWithItsHistory(t *testing.T) {
	e := newEnv(t, "ines")
	ctx := context.Background()
	fail := e.test(104, 13)
	orig, _ := e.store.Test(e.project, fail.TestID)
	e.tick()
	fixed, err := e.store.CorrectTest(ctx, e.project, fail.TestID, "station typed as 4+01", func(in *TestInput) {
		in.Location.Station = 410 * soil.Foot
		in.Remarks = "east of the culvert"
	})
	if err != nil {
		t.Fatal(err)
	}
	// A second device corrected the original too, unaware of the first
	// correction: two revisions supersede one.
	e.rec(&ledger.TestCorrected{TestID: fail.TestID, Supersedes: orig.Current, Reason: "moisture re-read",
		Content: func() ledger.TestContent { c := orig.Content; c.Readings.SandCone.Moisture = 13.4; return c.content() }()})
	e.tick()
	re, err := e.store.RecordRetest(ctx, e.project, fail.TestID, RetestInput{Readings: sandCone(113, 13)})
	if err != nil {
		t.Fatal(err)
	}
	e.as("quinn")
	if err := e.store.ReviewTest(ctx, e.project, fail.TestID, Return, "which revision stands?"); err != nil {
		t.Fatal(err)
	}
	if err := e.store.AcceptException(ctx, e.project, fail.TestID, "within the engineer's tolerance"); err != nil {
		t.Fatal(err)
	}

	tt, err := e.store.Test(e.project, fail.TestID)
	if err != nil {
		t.Fatal(err)
	}
	if len(tt.Revisions) != 3 || tt.Revisions[0].Supersedes != "" || tt.Revisions[1].Supersedes != orig.Current ||
		tt.Revisions[2].Supersedes != orig.Current || tt.Revisions[1].Author != "ines" {
		t.Fatalf("revisions: %+v", tt.Revisions)
	}
	reasons := map[string]bool{}
	for _, r := range tt.Revisions[1:] {
		reasons[r.Reason] = true
		if r.Time.Before(tt.Revisions[0].Time) {
			t.Errorf("revision %s at %v, before the original at %v", r.EventID, r.Time, tt.Revisions[0].Time)
		}
	}
	if !reasons["station typed as 4+01"] || !reasons["moisture re-read"] {
		t.Errorf("revision reasons: %v", reasons)
	}
	if fixed.EventID != tt.Revisions[1].EventID && fixed.EventID != tt.Revisions[2].EventID {
		t.Errorf("the correction %s is not in the history", fixed.EventID)
	}
	if !hasFlag(tt.Flags, FlagConcurrentRevisions) {
		t.Errorf("flags %v, want %s", tt.Flags, FlagConcurrentRevisions)
	}
	if cs := e.store.Conflicts(e.project); len(cs) != 1 || cs[0].ID != fail.TestID {
		t.Errorf("conflicts: %d tests, want the corrected test", len(cs))
	}
	if len(tt.Retests) != 1 || tt.Retests[0] != re.TestID || tt.Author != "ines" || tt.Project != e.project || tt.Day != "2026-09-14" ||
		!tt.Taken.Equal(time.Date(2026, 9, 14, 13, 53, 0, 0, time.UTC)) {
		t.Errorf("test %+v", tt)
	}
	if r, _ := e.store.Test(e.project, re.TestID); r.RetestOf != fail.TestID || r.Result.Verdict != Pass ||
		r.Content.Location.Station != tt.Content.Location.Station || r.Content.SpecID != e.spec {
		t.Errorf("retest: %+v", r)
	}
	if tt.ReviewStatus != Returned || len(tt.Reviews) != 1 || tt.Reviews[0].Author != "quinn" {
		t.Errorf("reviews: %s %+v", tt.ReviewStatus, tt.Reviews)
	}
	if !tt.ExceptionAccepted || len(tt.Exceptions) != 1 || tt.Exceptions[0].Revision != tt.Current {
		t.Errorf("exceptions: %v %+v", tt.ExceptionAccepted, tt.Exceptions)
	}
	lim := tt.Result.Limits
	if lim.SpecID != e.spec || lim.MinCompaction != "95" || lim.MoistureLow != "-2" || lim.MoistureHigh != "2" ||
		lim.MoistureBasis != PointsOfOptimum || lim.SpecName != "basin embankment" {
		t.Errorf("limits: %+v", lim)
	}
	if tt.Result.Method != SandConeMethod || tt.Result.Verdict != Fail || len(tt.Result.Reasons) == 0 ||
		tt.Result.Reasons[0].Code != ReasonCompactionBelowMinimum {
		t.Errorf("result: %+v", tt.Result)
	}
	if len(fail.Steps) == 0 || fail.Steps[len(fail.Steps)-1].Quantity != DensityQuantity {
		t.Errorf("steps: %+v", fail.Steps)
	}

	e.as("ines")
	if err := e.store.VoidTest(ctx, e.project, re.TestID, "tested the wrong lift"); err != nil {
		t.Fatal(err)
	}
	if r, _ := e.store.Test(e.project, re.TestID); !r.Voided || len(r.Voids) != 1 || r.Voids[0].Reason != "tested the wrong lift" {
		t.Errorf("voided retest: %v %+v", r.Voided, r.Voids)
	}
	// Values handed out are copies: changing one leaves the store's view.
	tt.Content.Readings.SandCone.SoilMass = 0
	tt.Revisions[0].Content.Location.Station = -1
	if again, _ := e.store.Test(e.project, fail.TestID); again.Content.Readings.SandCone.SoilMass == 0 || again.Revisions[0].Content.Location.Station == -1 {
		t.Error("changing a returned test changed the store's")
	}
}

// What a device shows after a typed method is what any replica decoding
// the signed entry shows: the store reopened rebuilds its view from the
// entries' bytes, and its digest is the same. Optional lists left empty
// (a reference's points, a correction's pairs) are where they could part.
func TestTypedEntriesReadBackAsSigned(t *testing.T) {
	e := newEnv(t, "quinn")
	ctx := context.Background()
	if _, err := e.store.AddReference(ctx, e.project, Reference{Material: "silt", Standard: ASTMD1557, Method: "B",
		MaxDryDensity: 1900, OptimumMoisture: 12}); err != nil {
		t.Fatal(err)
	}
	gauge, err := e.store.RegisterEquipment(ctx, e.project, Equipment{Kind: NuclearGaugeEquipment, SerialNumber: "G-1"})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := e.store.SetMoistureCorrection(ctx, e.project, MoistureCorrection{EquipmentID: gauge, ReferenceID: e.ref,
		Kind: FactorCorrection, Value: 1.1}); err != nil {
		t.Fatal(err)
	}
	if _, err := e.store.MeasureBorrowSource(ctx, e.project, BorrowSource{Name: "pit", BankTests: []Readings{
		{WetDensity: &MeasuredDensity{WetDensity: 1900, Moisture: 8}}}}); err != nil {
		t.Fatal(err)
	}
	if _, err := e.store.RecordPlacement(ctx, e.project, Placement{Feature: "pad", Thickness: 0.2, CompactedVolume: 10}); err != nil {
		t.Fatal(err)
	}
	digest := e.store.Digest(e.project)
	e.as("quinn")
	if got := e.store.Digest(e.project); got != digest {
		t.Errorf("the view rebuilt from the signed entries (%s) differs from the one the typed methods left (%s)", got, digest)
	}
}
