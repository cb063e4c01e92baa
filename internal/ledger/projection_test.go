package ledger

import (
	"testing"

	"github.com/google/go-cmp/cmp"

	"tamp/internal/qc"
	"tamp/internal/soil"
)

func TestGradeFromReadings(t *testing.T) {
	f := newFixture(t, 1)
	p := NewProjection(f.project)
	spec, ref := f.spec(), f.reference()
	apply(t, p, f.emit("office", f.setUp()), f.emit("qa", spec), f.emit("qa", ref))
	r, _ := p.Reference(ref.ID)
	if r.MaxDry <= 0 || !r.Bracketed {
		t.Fatalf("reference fit: MDD %v bracketed %v", r.MaxDry, r.Bracketed)
	}
	mdd := r.MaxDry / soil.PoundPerCubicFoot
	good := f.test(ref.ID, spec.ID, 0.97*mdd, r.Optimum-1)
	bad := f.test(ref.ID, spec.ID, 0.92*mdd, r.Optimum-1)
	apply(t, p, f.emit("ann", good), f.emit("ann", bad))
	if v := verdictOf(t, p, good.TestID); v != qc.Pass {
		t.Errorf("97 %% test: %v", v)
	}
	tb, _ := p.Test(bad.TestID)
	if tb.Result.Verdict != qc.Fail || !hasFlag(tb.Result.Reasons, qc.CompactionBelowMinimum) {
		t.Errorf("92 %% test: %v %v", tb.Result.Verdict, tb.Result.Reasons)
	}
	if tb.Day != "2026-06-15" {
		t.Errorf("day = %q, want the Denver date", tb.Day)
	}
}

func TestPendingUntilReferenceArrives(t *testing.T) {
	f := newFixture(t, 2)
	p := NewProjection(f.project)
	spec, ref := f.spec(), f.reference()
	test := f.test(ref.ID, spec.ID, 112, 12)
	refEv, specEv, testEv := f.emit("qa", ref), f.emit("qa", spec), f.emit("ann", test)
	out, err := p.Apply(testEv)
	if err != nil {
		t.Fatal(err)
	}
	if out.Status != Waiting || len(out.Missing) != 2 {
		t.Errorf("outcome = %+v, want waiting for the reference and spec", out)
	}
	if v := verdictOf(t, p, test.TestID); v != qc.Pending {
		t.Errorf("verdict without reference = %v, want pending", v)
	}
	apply(t, p, refEv, specEv)
	if v := verdictOf(t, p, test.TestID); v == qc.Pending {
		t.Error("still pending after the reference and spec arrived")
	}
	if out, _ := p.Apply(testEv); out.Status != Duplicate || len(out.Missing) != 0 {
		t.Errorf("re-apply = %+v, want a duplicate with nothing missing", out)
	}
}

func TestCorrectionsAndConcurrentRevisions(t *testing.T) {
	f := newFixture(t, 3)
	p := NewProjection(f.project)
	spec, ref := f.spec(), f.reference()
	test := f.test(ref.ID, spec.ID, 100, 12)
	rec := f.emit("ann", test)
	apply(t, p, f.emit("qa", spec), f.emit("qa", ref), rec)
	fix := func(dry float64, reason string) *TestCorrected {
		c := test.Content
		c.Readings = sandCone(dry, 12)
		return &TestCorrected{TestID: test.TestID, Supersedes: rec.Event.ID, Reason: reason, Content: c}
	}
	a := f.emit("ann", fix(112, "soil mass typed as 6.11, weighed 8.11"))
	if v := verdictOf(t, p, test.TestID); v != qc.Fail {
		t.Fatalf("before correction: %v", v)
	}
	apply(t, p, a)
	tt, _ := p.Test(test.TestID)
	if tt.Current != a.Event.ID || len(tt.Revisions) != 2 || tt.Result.Verdict != qc.Pass {
		t.Errorf("after correction: current %s (want %s), %d revisions, %v", tt.Current, a.Event.ID, len(tt.Revisions), tt.Result.Verdict)
	}
	if hasFlag(tt.Flags, ConcurrentRevisions) {
		t.Error("one correction flagged as concurrent")
	}
	// A second device corrects the same base revision: concurrent.
	b := f.emit("ann-laptop", fix(111, "second entry of the same fix"))
	b.Event.Author = "user-ann" // same inspector, other device
	apply(t, p, b)
	tt, _ = p.Test(test.TestID)
	if !hasFlag(tt.Flags, ConcurrentRevisions) || len(tt.Revisions) != 3 {
		t.Errorf("concurrent revisions: flags %v, %d revisions", tt.Flags, len(tt.Revisions))
	}
	want := a.Event.ID
	if order(&a.Event, &b.Event) < 0 {
		want = b.Event.ID
	}
	if tt.Current != want {
		t.Errorf("current = %s, want the later by (HLC, device, id) %s", tt.Current, want)
	}
}

func TestUnattachedCorrectionWaits(t *testing.T) {
	f := newFixture(t, 4)
	p := NewProjection(f.project)
	test := f.test("", "", 110, 12)
	rec := f.emit("ann", test)
	c1 := f.emit("ann", &TestCorrected{TestID: test.TestID, Supersedes: rec.Event.ID, Reason: "typo", Content: test.Content})
	c2 := f.emit("ann", &TestCorrected{TestID: test.TestID, Supersedes: c1.Event.ID, Reason: "typo again", Content: test.Content})
	out, err := p.Apply(c2)
	if err != nil || out.Status != Waiting {
		t.Fatalf("correction before its base: %+v %v", out, err)
	}
	if _, ok := p.Test(test.TestID); ok {
		t.Fatal("a correction alone made a test")
	}
	apply(t, p, rec)
	tt, _ := p.Test(test.TestID)
	if tt.Current != rec.Event.ID || len(tt.Unattached) != 1 {
		t.Errorf("with the base's base missing: current %s, unattached %v", tt.Current, tt.Unattached)
	}
	apply(t, p, c1)
	tt, _ = p.Test(test.TestID)
	if tt.Current != c2.Event.ID || len(tt.Unattached) != 0 || len(tt.Revisions) != 3 {
		t.Errorf("whole chain: current %s want %s, unattached %v", tt.Current, c2.Event.ID, tt.Unattached)
	}
}

func TestVoidReviewAndFlags(t *testing.T) {
	f := newFixture(t, 5)
	p := NewProjection(f.project)
	spec, ref := f.spec(), f.reference()
	apply(t, p, f.emit("qa", spec), f.emit("qa", ref))
	r, _ := p.Reference(ref.ID)
	mdd := r.MaxDry / soil.PoundPerCubicFoot

	fail := f.test(ref.ID, spec.ID, 0.90*mdd, r.Optimum)
	failEv := f.emit("ann", fail)
	apply(t, p, failEv)
	retest := f.test(ref.ID, spec.ID, 0.98*mdd, r.Optimum)
	retest.RetestOf = fail.TestID
	apply(t, p, f.emit("ann", retest))
	rt, _ := p.Test(retest.TestID)
	if hasFlag(rt.Flags, RetestOfPassingTest) || p.RetestsOf(fail.TestID)[0] != retest.TestID {
		t.Errorf("retest of a failure: flags %v, retests %v", rt.Flags, p.RetestsOf(fail.TestID))
	}
	again := f.test(ref.ID, spec.ID, 0.98*mdd, r.Optimum)
	again.RetestOf = retest.TestID
	apply(t, p, f.emit("ann", again))
	ag, _ := p.Test(again.TestID)
	if !hasFlag(ag.Flags, RetestOfPassingTest) {
		t.Errorf("retest of a passing test not flagged: %v", ag.Flags)
	}

	apply(t, p, f.emit("office", &TestReviewed{TestID: fail.TestID, Revision: failEv.Event.ID, Decision: Return, Comment: "rework and retest"}))
	ft, _ := p.Test(fail.TestID)
	if ft.ReviewStatus != Returned {
		t.Errorf("review status = %v", ft.ReviewStatus)
	}
	apply(t, p, f.emit("ann", &TestReviewed{TestID: fail.TestID, Revision: failEv.Event.ID, Decision: Approve}))
	ft, _ = p.Test(fail.TestID)
	if ft.ReviewStatus != Approved || !hasFlag(ft.Flags, SelfReview) {
		t.Errorf("self review: status %v flags %v", ft.ReviewStatus, ft.Flags)
	}
	apply(t, p, f.emit("ann", &TestVoided{TestID: again.TestID, Reason: "tested the wrong lift"}))
	ag, _ = p.Test(again.TestID)
	if !ag.Voided() || len(ag.Revisions) != 1 {
		t.Errorf("void: %v %d", ag.Voided(), len(ag.Revisions))
	}
}

// The server recomputes results; a device that reports numbers the readings
// do not give is flagged.
func TestTamperedDeviceResultFlagged(t *testing.T) {
	f := newFixture(t, 6)
	p := NewProjection(f.project)
	spec, ref := f.spec(), f.reference()
	apply(t, p, f.emit("qa", spec), f.emit("qa", ref))
	r, _ := p.Reference(ref.ID)
	mdd := r.MaxDry / soil.PoundPerCubicFoot
	honest := f.test(ref.ID, spec.ID, 0.93*mdd, r.Optimum)
	apply(t, p, f.emit("ann", honest))
	ht, _ := p.Test(honest.TestID)
	res := ht.Result
	honest2 := f.test(ref.ID, spec.ID, 0.93*mdd, r.Optimum)
	honest2.Content.DeviceResults = &Results{WetDensity: res.WetDensity, DryDensity: res.DryDensity, Moisture: res.Moisture,
		RelativeCompaction: res.RelativeCompaction, Verdict: res.Verdict}
	tampered := f.test(ref.ID, spec.ID, 0.93*mdd, r.Optimum)
	tampered.Content.DeviceResults = &Results{WetDensity: res.WetDensity, DryDensity: res.DryDensity * 1.03, Moisture: res.Moisture,
		RelativeCompaction: res.RelativeCompaction * 1.03, Verdict: qc.Pass}
	apply(t, p, f.emit("ann", honest2), f.emit("ann", tampered))
	h2, _ := p.Test(honest2.TestID)
	tp, _ := p.Test(tampered.TestID)
	if hasFlag(h2.Flags, DeviceResultMismatch) {
		t.Errorf("honest device flagged: %v", h2.Flags)
	}
	if !hasFlag(tp.Flags, DeviceResultMismatch) || tp.Result.Verdict != qc.Fail {
		t.Errorf("tampered device: flags %v verdict %v (the recomputed verdict stands)", tp.Flags, tp.Result.Verdict)
	}
}

func TestEquipmentFlags(t *testing.T) {
	f := newFixture(t, 7)
	p := NewProjection(f.project)
	gauge := &EquipmentRegistered{ID: f.id(true), Kind: NuclearGauge, Model: "MD-9", SerialNumber: "G-2231", CalibrationDue: "2026-06-01"}
	apply(t, p, f.emit("office", f.setUp()), f.emit("office", gauge))
	test := f.test("", "", 110, 12)
	test.Content.EquipmentID = gauge.ID
	test.Content.Readings = Readings{Nuclear: &NuclearReadings{ProbeDepth: 8 * soil.Inch,
		Counts: []soil.NuclearReading{{WetDensity: pcf(125), WaterPerVolume: pcf(13)}}}}
	apply(t, p, f.emit("ann", test))
	tt, _ := p.Test(test.TestID)
	if !hasFlag(tt.Flags, GaugeCalibrationLapsed) || !hasFlag(tt.Flags, NoStandardCount) {
		t.Errorf("flags = %v, want lapsed calibration and no standard count", tt.Flags)
	}
	apply(t, p, f.emit("ann", &EquipmentRegistered{ID: gauge.ID, Kind: NuclearGauge, Model: "MD-9", SerialNumber: "G-2231", CalibrationDue: "2027-06-01"}),
		f.emit("ann", &StandardCountRecorded{EquipmentID: gauge.ID, Date: tt.Day, DensityCount: 2841, MoistureCount: 712, Accepted: true}))
	tt, _ = p.Test(test.TestID)
	if hasFlag(tt.Flags, GaugeCalibrationLapsed) || hasFlag(tt.Flags, NoStandardCount) {
		t.Errorf("after recalibration and a count: flags %v", tt.Flags)
	}
	if !hasFlag(tt.Result.Flags, qc.NuclearMoistureUncorrected) {
		t.Errorf("uncorrected nuclear moisture not flagged: %v", tt.Result.Flags)
	}
}

func TestApplyRefusals(t *testing.T) {
	f := newFixture(t, 8)
	p := NewProjection(f.project)
	other := newFixture(t, 9)
	if _, err := p.Apply(other.emit("ann", other.spec())); ReasonOf(err) != WrongProject {
		t.Errorf("other project: %v", err)
	}
	s := f.emit("qa", f.spec())
	apply(t, p, s)
	s2 := s
	s2.Body = append([]byte{}, s.Body...)
	s2.Body[len(s2.Body)-1] ^= 1
	if _, err := p.Apply(s2); ReasonOf(err) != ConflictingID {
		t.Errorf("same id, other bytes: %v", err)
	}
	before := p.Digest()
	bad := f.test("", "", 110, 12)
	bad.Content.Readings.SandCone.SoilMass = -1
	e := Event{ID: f.id(true), Project: f.project, Author: "user-ann", Device: f.device("ann").id, DeviceSeq: 99,
		HLC: HLC{Wall: 1}, DeviceTime: f.wall, Kind: bad}
	if _, err := p.Apply(Signed{Event: e}); ReasonOf(err) != ImpossibleReadings {
		t.Errorf("negative soil mass: %v", err)
	}
	if p.Digest() != before {
		t.Error("a refused event changed the state")
	}
}

func TestExceptionAccepted(t *testing.T) {
	f := newFixture(t, 30)
	p := NewProjection(f.project)
	spec, ref := f.spec(), f.reference()
	apply(t, p, f.emit("qa", spec), f.emit("qa", ref))
	fail := f.test(ref.ID, spec.ID, 95, 12)
	rec := f.emit("ann", fail)
	apply(t, p, rec)
	tt, _ := p.Test(fail.TestID)
	if tt.Result.Verdict != qc.Fail || tt.ExceptionAccepted() {
		t.Fatalf("before: %v, exception %v", tt.Result.Verdict, tt.ExceptionAccepted())
	}
	apply(t, p, f.emit("qa", &ExceptionAccepted{TestID: fail.TestID, Revision: rec.Event.ID, Reason: "engineer of record accepts 93 % in the toe berm"}))
	tt, _ = p.Test(fail.TestID)
	if !tt.ExceptionAccepted() || tt.Result.Verdict != qc.Fail {
		t.Errorf("after: exception %v, verdict %v (the failure stays in the record)", tt.ExceptionAccepted(), tt.Result.Verdict)
	}
	// A correction makes a new revision the exception does not cover.
	c := fail.Content
	apply(t, p, f.emit("ann", &TestCorrected{TestID: fail.TestID, Supersedes: rec.Event.ID, Reason: "typo", Content: c}))
	tt, _ = p.Test(fail.TestID)
	if tt.ExceptionAccepted() {
		t.Error("an exception of an earlier revision covers the correction")
	}
	if err := Validate(Event{ID: f.id(true), Project: f.project, Author: "qa", Device: "d", DeviceSeq: 1, HLC: HLC{Wall: 1},
		Kind: &ExceptionAccepted{TestID: fail.TestID, Revision: rec.Event.ID}}); ReasonOf(err) != InvalidField {
		t.Errorf("exception without a reason: %v", err)
	}
}

// A review, a void or an acceptance rebuilds a test but keeps its grade:
// every flag the grade raises must stay, as on a replica where the review
// arrived before the test and the test was graded afresh.
func TestRebuildKeepsGradeFlags(t *testing.T) {
	f := newFixture(t, 31)
	spec, ref := f.spec(), f.reference()
	gauge := &EquipmentRegistered{ID: f.id(true), Kind: NuclearGauge, Model: "MD-9", SerialNumber: "G-2231", CalibrationDue: "2026-06-01"}
	setup := []Signed{f.emit("office", f.setUp()), f.emit("qa", spec), f.emit("qa", ref), f.emit("office", gauge)}

	var tests []*TestRecorded
	fail := f.test(ref.ID, spec.ID, 95, 12)
	pass := f.test(ref.ID, spec.ID, 112, 13)
	tampered := f.test(ref.ID, spec.ID, 110, 13)
	tampered.Content.DeviceResults = &Results{WetDensity: 2000, DryDensity: 1800, Moisture: 13, RelativeCompaction: 99, Verdict: qc.Pass}
	nuclear := f.test(ref.ID, spec.ID, 0, 0)
	nuclear.Content.EquipmentID = gauge.ID
	nuclear.Content.Readings = Readings{Nuclear: &NuclearReadings{ProbeDepth: 8 * soil.Inch,
		Counts: []soil.NuclearReading{{WetDensity: pcf(125), WaterPerVolume: pcf(13)}}}}
	retest := f.test(ref.ID, spec.ID, 111, 13)
	retest.RetestOf = pass.TestID
	dense := f.test(ref.ID, spec.ID, 170, 12) // denser than its solids at the reference's Gs
	tests = append(tests, fail, pass, tampered, nuclear, retest, dense)
	var recorded, later []Signed
	for _, tr := range tests {
		s := f.emit("ann", tr)
		recorded = append(recorded, s)
		later = append(later, f.emit("olga", &TestReviewed{TestID: tr.TestID, Revision: s.Event.ID, Decision: Approve}))
	}
	later = append(later, f.emit("ann", &TestVoided{TestID: dense.TestID, Reason: "wrong lift"}),
		f.emit("qa", &ExceptionAccepted{TestID: fail.TestID, Revision: recorded[0].Event.ID, Reason: "toe berm"}))

	graded := NewProjection(f.project) // the tests graded, then reviewed
	apply(t, graded, setup...)
	apply(t, graded, recorded...)
	before := map[string]*Test{}
	for _, tr := range tests {
		before[tr.TestID], _ = graded.Test(tr.TestID)
	}
	apply(t, graded, later...)
	fresh := NewProjection(f.project) // the reviews first: each test graded once, with its reviews
	apply(t, fresh, later...)
	apply(t, fresh, setup...)
	apply(t, fresh, recorded...)

	codes := map[string]bool{}
	for _, tr := range tests {
		got, _ := graded.Test(tr.TestID)
		want, _ := fresh.Test(tr.TestID)
		if d := cmp.Diff(want, got); d != "" {
			t.Errorf("test %s reviewed after its grade differs from one graded with its review:\n%s", tr.TestID, d)
		}
		if d := cmp.Diff(before[tr.TestID].Result, got.Result); d != "" {
			t.Errorf("test %s: a review changed the result:\n%s", tr.TestID, d)
		}
		for _, fl := range got.Flags {
			codes[fl.Code] = true
		}
	}
	for _, code := range []string{CannotGrade, GaugeCalibrationLapsed, NoStandardCount, RetestOfPassingTest, DeviceResultMismatch} {
		if !codes[code] {
			t.Errorf("no test raised %s: the check does not reach it", code)
		}
		if !gradeFlag(code) {
			t.Errorf("gradeFlag(%s) = false: a rebuild would drop it", code)
		}
	}
	if graded.Digest() != fresh.Digest() {
		t.Error("the two replicas' states differ")
	}
}

// A record named by more tests than one chunk of its dependants holds
// regrades every one of them when it arrives.
func TestLateSpecRegradesEveryTest(t *testing.T) {
	f := newFixture(t, 32)
	spec, ref := f.spec(), f.reference()
	p := NewProjection(f.project)
	apply(t, p, f.emit("office", f.setUp()), f.emit("qa", ref))
	n := 2*depChunk + 3
	var ids []string
	for i := range n {
		tr := f.test(ref.ID, spec.ID, 104+float64(i%13), 12)
		ids = append(ids, tr.TestID)
		apply(t, p, f.emit("ann", tr))
	}
	if v := verdictOf(t, p, ids[0]); v != qc.Pending {
		t.Fatalf("before its spec: verdict %v, want pending", v)
	}
	apply(t, p, f.emit("qa", spec))
	for _, id := range ids {
		if tt, _ := p.Test(id); tt.Result.Verdict == qc.Pending || len(tt.Missing) > 0 {
			t.Fatalf("test %s of %d after its spec arrived: verdict %v, missing %v", id, n, tt.Result.Verdict, tt.Missing)
		}
	}
}
