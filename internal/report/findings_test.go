package report

import (
	"crypto/ed25519"
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"tamp/internal/ledger"
	"tamp/internal/qc"
	"tamp/internal/soil"
)

// addTimed records k by author with the hybrid time and device time given,
// as a device whose clock is off would.
func (b *book) addTimed(author string, k ledger.Kind, hlc, device time.Time) ledger.Signed {
	b.t.Helper()
	b.seq++
	s, err := ledger.Seal(ledger.Event{ID: id(), Project: b.project, Author: author, Device: "dev-" + author, DeviceSeq: b.seq,
		HLC: ledger.HLC{Wall: hlc.UnixMicro()}, DeviceTime: device, Kind: k}, b.key)
	if err != nil {
		b.t.Fatal(err)
	}
	if _, err := b.p.Apply(s); err != nil {
		b.t.Fatal(err)
	}
	return s
}

// enrol introduces a device of user with a role, as the server does; an
// empty device id introduces a new device. It returns the introduction.
func (b *book) enrol(user, role, device string) ledger.Signed {
	b.t.Helper()
	pub, _, _ := ed25519.GenerateKey(nil)
	if device == "" {
		device = id()
	}
	return b.add("server", &ledger.DeviceEnrolled{DeviceID: device, UserID: user, PublicKey: pub, Role: role, Enrolled: b.clock})
}

// auditContent is a test on the site's placement at dry density dry (pcf) and
// the optimum moisture, 12 %: RC = dry / 118.
func (s *site) auditContent(dry, station float64) ledger.TestContent {
	return ledger.TestContent{Readings: cone(dry, 12), ReferenceID: s.ref, SpecID: s.spec, PlacementID: s.place, Location: ledger.Location{Station: station}}
}

// auditRecord records content c by ann, as a retest of retestOf when set.
func (s *site) auditRecord(c ledger.TestContent, retestOf string) (string, ledger.Signed) {
	s.t.Helper()
	tr := &ledger.TestRecorded{TestID: id(), RetestOf: retestOf, Content: c}
	return tr.TestID, s.add("ann", tr)
}

func findingsCoded(fs []Finding, code FindingCode) []Finding {
	var out []Finding
	for _, f := range fs {
		if f.Code == code {
			out = append(out, f)
		}
	}
	return out
}

// wantFinding is a finding expected: its test, its entries and words its message
// must hold.
type wantFinding struct {
	test    string
	entries []string
	words   []string
}

func checkFindings(t *testing.T, fs []Finding, code FindingCode, ws ...wantFinding) {
	t.Helper()
	got := findingsCoded(fs, code)
	if len(got) != len(ws) {
		t.Errorf("%s: %d findings, want %d: %+v", code, len(got), len(ws), got)
		return
	}
	for i, w := range ws {
		f := got[i]
		if f.TestID != w.test {
			t.Errorf("%s[%d]: test %q, want %q (%s)", code, i, f.TestID, w.test, f.Message)
		}
		if !slices.Equal(f.Entries, w.entries) {
			t.Errorf("%s[%d]: entries %v, want %v", code, i, f.Entries, w.entries)
		}
		for _, word := range w.words {
			if !strings.Contains(f.Message, word) {
				t.Errorf("%s[%d]: message %q lacks %q", code, i, f.Message, word)
			}
		}
	}
}

// Against the site's spec (RC >= 95 % of 118 pcf), a dry density of 105
// pcf is RC 89.0 % and fails; 113 pcf is 95.8 % and passes.
const (
	failDry = 105.0
	passDry = 113.0
)

func TestFindingsFailureNotRetested(t *testing.T) {
	t.Run("window edge", func(t *testing.T) {
		s := newSite(t)
		f, fe := s.auditRecord(s.auditContent(failDry, 100), "")
		taken := fe.Event.DeviceTime
		// Exactly the default window (48 h) old: not yet overdue.
		if got := findingsCoded(Findings(s.p, AuditOptions{AsOf: taken.Add(48 * time.Hour)}), FailureNotRetested); len(got) != 0 {
			t.Errorf("at 48h: %+v, want none", got)
		}
		checkFindings(t, Findings(s.p, AuditOptions{AsOf: taken.Add(48*time.Hour + time.Minute)}), FailureNotRetested,
			wantFinding{f, []string{fe.Event.ID}, []string{shortRef(f), "89.0 %", "48h1m later", "retest window is 48h", taken.Format(auditStamp)}})
		// The project's own window, 24 h, replaces the default.
		s.add("admin", &ledger.ProjectSetUp{Name: "Tern Hollow spur", Units: soil.SI, RetestWithin: 24 * time.Hour})
		checkFindings(t, Findings(s.p, AuditOptions{AsOf: taken.Add(24*time.Hour + time.Minute)}), FailureNotRetested,
			wantFinding{f, []string{fe.Event.ID}, []string{"24h1m later", "retest window is 24h"}})
	})
	t.Run("closures", func(t *testing.T) {
		s := newSite(t)
		open, oe := s.auditRecord(s.auditContent(failDry, 100), "")
		closed, _ := s.auditRecord(s.auditContent(failDry, 200), "")
		s.auditRecord(s.auditContent(passDry, 201), closed)
		// A passing retest the office returned does not count: still open.
		returned, re := s.auditRecord(s.auditContent(failDry, 300), "")
		rt, rre := s.auditRecord(s.auditContent(passDry, 301), returned)
		s.add("office", &ledger.TestReviewed{TestID: rt, Revision: rre.Event.ID, Decision: ledger.Return, Comment: "no sketch"})
		// A failing retest closed by a retest of its own closes the chain.
		chain, _ := s.auditRecord(s.auditContent(failDry, 400), "")
		mid, _ := s.auditRecord(s.auditContent(failDry+1, 401), chain)
		s.auditRecord(s.auditContent(passDry, 402), mid)
		voided, _ := s.auditRecord(s.auditContent(failDry, 500), "")
		s.add("ann", &ledger.TestVoided{TestID: voided, Reason: "wrong lift"})
		excepted, ee := s.auditRecord(s.auditContent(failDry, 600), "")
		s.add("qa", &ledger.ExceptionAccepted{TestID: excepted, Revision: ee.Event.ID, Reason: "engineer's memo 4"})
		s.auditRecord(s.auditContent(passDry, 700), "")
		fs := Findings(s.p, AuditOptions{AsOf: s.clock.Add(30 * 24 * time.Hour)})
		checkFindings(t, fs, FailureNotRetested, wantFinding{open, []string{oe.Event.ID}, nil}, wantFinding{returned, []string{re.Event.ID}, nil})
	})
}

// The haversine formula, d = 2 R asin(sqrt(sin²(Δφ/2) + cos φ1 cos φ2
// sin²(Δλ/2))), R = 6 371 008.8 m (IUGG mean radius), against distances
// worked by hand [formula]: along a meridian it is R Δφ exactly; along a
// parallel, for so short an arc, R cos φ Δλ; on a diagonal, the two in
// quadrature at the mean latitude (both to well under a millimetre here).
func TestGreatCircle(t *testing.T) {
	deg := math.Pi / 180
	cases := []struct {
		name string
		a, b ledger.GeoPosition
		want float64
	}{
		// 6 371 008.8 x 0.0001 x pi / 180 = 11.11951 m.
		{"meridian", ledger.GeoPosition{Latitude: 45, Longitude: -120}, ledger.GeoPosition{Latitude: 45.0001, Longitude: -120}, 11.11951},
		// 11.11951 x cos 60 = 5.55975 m.
		{"parallel at 60 N", ledger.GeoPosition{Latitude: 60, Longitude: -120}, ledger.GeoPosition{Latitude: 60, Longitude: -120.0001}, 5.55975},
		// 11.11951 x sqrt(1 + cos² 45.00005) = 13.61856 m.
		{"diagonal at 45 N", ledger.GeoPosition{Latitude: 45, Longitude: -120}, ledger.GeoPosition{Latitude: 45.0001, Longitude: -119.9999}, 13.61856},
	}
	for _, c := range cases {
		if got := greatCircle(c.a, c.b); math.Abs(got-c.want) > 1e-5 {
			t.Errorf("%s: greatCircle = %.6f m, want %.5f", c.name, got, c.want)
		}
	}
	if got, want := greatCircle(cases[0].a, cases[0].b), 6371008.8*0.0001*deg; math.Abs(got-want) > 1e-6 {
		t.Errorf("meridian: %.7f m, want R dphi = %.7f", got, want)
	}
}

func TestFindingsRetestAwayFromFailure(t *testing.T) {
	s := newSite(t)
	at := func(station, offset float64, pos *ledger.GeoPosition) ledger.TestContent {
		c := s.auditContent(failDry, station)
		c.Location.Offset, c.Location.Position = offset, pos
		return c
	}
	retest := func(orig string, c ledger.TestContent) (string, ledger.Signed) {
		c.Readings = cone(passDry, 12)
		return s.auditRecord(c, orig)
	}
	// Plan distance, the project's default of 10 m: 9.9 m is within; 10.0 m
	// is at the limit, not beyond; sqrt(6² + 8.1²) = 10.08 m is beyond.
	f1, _ := s.auditRecord(at(100, 0, nil), "")
	retest(f1, at(109.9, 0, nil))
	f2, _ := s.auditRecord(at(300, 0, nil), "")
	retest(f2, at(306, 8, nil))
	f3, f3e := s.auditRecord(at(500, 0, nil), "")
	_, r3e := retest(f3, at(506, 8.1, nil))
	// Satellite positions govern when both tests carry one: 0.0001° of
	// latitude (11.1 m) beyond, at the same station; 0.0001° of longitude at
	// 60° N (5.6 m) within, 100 m apart by station.
	f4, f4e := s.auditRecord(at(700, 0, &ledger.GeoPosition{Latitude: 45, Longitude: -120}), "")
	_, r4e := retest(f4, at(700, 0, &ledger.GeoPosition{Latitude: 45.0001, Longitude: -120}))
	f5, _ := s.auditRecord(at(900, 0, &ledger.GeoPosition{Latitude: 60, Longitude: -120}), "")
	retest(f5, at(1000, 0, &ledger.GeoPosition{Latitude: 60, Longitude: -120.0001}))
	// A voided retest 50 m away is not judged.
	f6, _ := s.auditRecord(at(1100, 0, nil), "")
	r6, _ := retest(f6, at(1150, 0, nil))
	s.add("ann", &ledger.TestVoided{TestID: r6, Reason: "tested the shoulder"})

	r3, r4 := r3e.Event.Kind.(*ledger.TestRecorded).TestID, r4e.Event.Kind.(*ledger.TestRecorded).TestID
	fs := Findings(s.p, AuditOptions{})
	checkFindings(t, fs, RetestAwayFromFailure,
		wantFinding{r3, []string{f3e.Event.ID, r3e.Event.ID}, []string{shortRef(r3), "10.1 m from test " + shortRef(f3), "plan distance from station and offset", "10.0 m"}},
		wantFinding{r4, []string{f4e.Event.ID, r4e.Event.ID}, []string{"11.1 m from test " + shortRef(f4), "great-circle"}})

	// With the project's retest distance at 12 m, neither is beyond.
	s.add("admin", &ledger.ProjectSetUp{Name: "Tern Hollow spur", Units: soil.SI, RetestDistance: 12})
	checkFindings(t, Findings(s.p, AuditOptions{}), RetestAwayFromFailure)
}

func TestFindingsRetestOnOtherLift(t *testing.T) {
	s := newSite(t)
	lift2 := id()
	s.add("office", &ledger.LiftPlacementRecorded{ID: lift2, Feature: "embankment", LiftNumber: 2, Thickness: 0.2, CompactedVolume: 1000, BorrowSourceID: s.borrow})
	f, fe := s.auditRecord(s.auditContent(failDry, 100), "")
	// Same placement: none.
	s.auditRecord(s.auditContent(passDry, 101), f)
	// No placement, but the feature and lift its placement records: none.
	same := s.auditContent(passDry, 102)
	same.PlacementID, same.Feature, same.LiftNumber = "", "embankment", 1
	s.auditRecord(same, f)
	// Lift 2's placement: one.
	other := s.auditContent(passDry, 103)
	other.PlacementID = lift2
	r1, r1e := s.auditRecord(other, f)
	// No placement, lift 3 by its own account: one.
	three := s.auditContent(passDry, 104)
	three.PlacementID, three.LiftNumber = "", 3
	r2, r2e := s.auditRecord(three, f)
	checkFindings(t, Findings(s.p, AuditOptions{}), RetestOnOtherLift,
		wantFinding{r1, []string{fe.Event.ID, r1e.Event.ID}, []string{"placement " + shortRef(lift2) + ", embankment, lift 2", "placement " + shortRef(s.place) + ", embankment, lift 1"}},
		wantFinding{r2, []string{fe.Event.ID, r2e.Event.ID}, []string{"is on lift 3;"}})
}

func TestFindingsRetestBeforeOriginal(t *testing.T) {
	s := newSite(t)
	f, fe := s.auditRecord(s.auditContent(failDry, 100), "")
	t0 := fe.Event.DeviceTime
	retest := func(hlc, device time.Time) (string, ledger.Signed) {
		tr := &ledger.TestRecorded{TestID: id(), RetestOf: f, Content: s.auditContent(passDry, 101)}
		return tr.TestID, s.addTimed("ann", tr, hlc, device)
	}
	retest(t0.Add(time.Hour), t0.Add(time.Hour)) // after in both: none
	r1, r1e := retest(t0.Add(2*time.Hour), t0.Add(-10*time.Minute))
	r2, r2e := retest(t0.Add(-time.Second), t0.Add(3*time.Hour))
	checkFindings(t, Findings(s.p, AuditOptions{}), RetestBeforeOriginal,
		wantFinding{r2, []string{fe.Event.ID, r2e.Event.ID}, []string{"hybrid time " + t0.Add(-time.Second).Format(auditStamp) + ", before " + t0.Format(auditStamp)}},
		wantFinding{r1, []string{fe.Event.ID, r1e.Event.ID}, []string{"device time " + t0.Add(-10*time.Minute).Format(auditStamp) + ", before " + t0.Format(auditStamp)}})
}

func TestFindingsPassingTestRetested(t *testing.T) {
	s := newSite(t)
	p, pe := s.auditRecord(s.auditContent(passDry, 100), "")
	r, re := s.auditRecord(s.auditContent(passDry+2, 100), p)
	f, _ := s.auditRecord(s.auditContent(failDry, 200), "")
	s.auditRecord(s.auditContent(passDry, 200), f) // retest of a failure: none
	checkFindings(t, Findings(s.p, AuditOptions{}), PassingTestRetested,
		wantFinding{r, []string{pe.Event.ID, re.Event.ID}, []string{"retest " + shortRef(r) + " by user ann", "test " + shortRef(p) + ", which passed (relative compaction 95.8 %)"}})
}

func TestFindingsFailureVoidedWithoutAcceptance(t *testing.T) {
	s := newSite(t)
	s.enrol("qa", "qa", "")
	s.enrol("office", "office", "")
	void := func(test string) ledger.Signed {
		return s.add("ann", &ledger.TestVoided{TestID: test, Reason: "wrong lift"})
	}
	except := func(by, test string, rev ledger.Signed) {
		s.add(by, &ledger.ExceptionAccepted{TestID: test, Revision: rev.Event.ID, Reason: "memo"})
	}
	// Voided with no exception: one.
	f1, f1e := s.auditRecord(s.auditContent(failDry, 100), "")
	v1 := void(f1)
	// QA's exception, then voided: none.
	f2, f2e := s.auditRecord(s.auditContent(failDry, 200), "")
	except("qa", f2, f2e)
	void(f2)
	// The office's exception is not QA's: one.
	f3, f3e := s.auditRecord(s.auditContent(failDry, 300), "")
	except("office", f3, f3e)
	v3 := void(f3)
	// Failed, corrected to a pass, voided: one (a revision failed).
	f4, f4e := s.auditRecord(s.auditContent(failDry, 400), "")
	s.add("ann", &ledger.TestCorrected{TestID: f4, Supersedes: f4e.Event.ID, Reason: "mass", Content: s.auditContent(passDry, 400)})
	v4 := void(f4)
	// Passed and voided, or failed and not voided: none.
	p5, _ := s.auditRecord(s.auditContent(passDry, 500), "")
	void(p5)
	s.auditRecord(s.auditContent(failDry, 600), "")
	// Kim accepted before becoming QA: her role then counts, so one.
	f7, f7e := s.auditRecord(s.auditContent(failDry, 700), "")
	except("kim", f7, f7e)
	s.enrol("kim", "qa", "")
	v7 := void(f7)

	checkFindings(t, Findings(s.p, AuditOptions{}), FailureVoidedWithoutAcceptance,
		wantFinding{f1, []string{f1e.Event.ID, v1.Event.ID}, []string{shortRef(f1), `voided by user ann ("wrong lift")`, "no QA manager accepted"}},
		wantFinding{f3, []string{f3e.Event.ID, v3.Event.ID}, []string{"accepted by user office (office) was not by QA"}},
		wantFinding{f4, []string{f4e.Event.ID, v4.Event.ID}, nil},
		wantFinding{f7, []string{f7e.Event.ID, v7.Event.ID}, []string{"kim (no role recorded)"}})
}

func TestFindingsCorrectionTurnedFailIntoPass(t *testing.T) {
	s := newSite(t)
	correct := func(test string, base ledger.Signed, dry float64, reason string) ledger.Signed {
		return s.add("ann", &ledger.TestCorrected{TestID: test, Supersedes: base.Event.ID, Reason: reason, Content: s.auditContent(dry, 100)})
	}
	// Fail (89.0 %) to pass (95.8 %): one.
	f1, f1e := s.auditRecord(s.auditContent(failDry, 100), "")
	c1 := correct(f1, f1e, passDry, "soil mass was 8.71 lb, not 8.11")
	// Fail to fail (91.5 %), pass to fail: none.
	f2, f2e := s.auditRecord(s.auditContent(failDry, 200), "")
	correct(f2, f2e, 108, "station")
	p3, p3e := s.auditRecord(s.auditContent(passDry, 300), "")
	correct(p3, p3e, failDry, "station")
	// Fail, fail (93.2 %), then pass: one, on the second correction.
	f4, f4e := s.auditRecord(s.auditContent(failDry, 400), "")
	c4a := correct(f4, f4e, 110, "moisture")
	c4b := correct(f4, c4a, passDry, "moisture again")

	when := c1.Event.DeviceTime.UTC().Format(auditStamp)
	checkFindings(t, Findings(s.p, AuditOptions{}), CorrectionTurnedFailIntoPass,
		wantFinding{f1, []string{f1e.Event.ID, c1.Event.ID}, []string{"correction by user ann at " + when + " by the device's clock", "hybrid time " + when,
			"fail (relative compaction 89.0 %) into a pass (95.8 %)", `"soil mass was 8.71 lb, not 8.11"`}},
		wantFinding{f4, []string{c4a.Event.ID, c4b.Event.ID}, []string{"fail (relative compaction 93.2 %) into a pass (95.8 %)", `"moisture again"`}})
}

func TestFindingsDeviceResultMismatch(t *testing.T) {
	s := newSite(t)
	c := s.auditContent(failDry, 100)
	r := s.p.Assess(c, "", "").Result
	results := func(rc float64, v qc.Verdict) *ledger.Results {
		return &ledger.Results{WetDensity: r.WetDensity, DryDensity: r.DryDensity, Moisture: r.Moisture, MaxDryDensity: r.MaxDryDensity,
			OptimumMoisture: r.OptimumMoisture, RelativeCompaction: rc, MoistureDeviation: r.MoistureDeviation, Verdict: v}
	}
	c.DeviceResults = results(r.RelativeCompaction, r.Verdict)
	s.auditRecord(c, "") // the device agrees: none
	c.DeviceResults = results(95.0, qc.Pass)
	bad, be := s.auditRecord(c, "")
	fs := Findings(s.p, AuditOptions{})
	checkFindings(t, fs, DeviceResultMismatch, wantFinding{bad, []string{be.Event.ID}, []string{"relative compaction 95.000 reported, 88.983 recomputed", "verdict pass reported, fail recomputed"}})
	if got := findingsCoded(fs, DeviceResultMismatch); len(got) == 1 {
		tt, _ := s.p.Test(bad)
		if i := slices.IndexFunc(tt.Flags, func(f qc.Finding) bool { return f.Code == ledger.DeviceResultMismatch }); i < 0 || got[0].Message != tt.Flags[i].Message {
			t.Errorf("message %q is not the test's flag", got[0].Message)
		}
	}
}

func TestFindingsClockSkew(t *testing.T) {
	s := newSite(t)
	f, fe := s.auditRecord(s.auditContent(passDry, 100), "")
	spec := s.add("qa", &ledger.SpecDefined{ID: id(), Name: "subgrade", MinCompaction: "98"})
	skews := map[string]int64{
		fe.Event.ID:   (7*60 + 12) * 1e6, // 7m12s ahead
		spec.Event.ID: -10 * 60 * 1e6,    // 10 min behind
		id():          1e9,               // an entry this replica does not hold: none
	}
	checkFindings(t, Findings(s.p, AuditOptions{Skews: skews}), ClockSkew,
		wantFinding{f, []string{fe.Event.ID}, []string{"device clock 7m12s ahead of the server's", "(test recorded about test " + shortRef(f) + ") by user ann from device dev-ann"}},
		wantFinding{"", []string{spec.Event.ID}, []string{"device clock 10m behind the server's", "(spec defined) by user qa from device dev-qa"}})
}

func TestFindingsReviewerNotOfficeOrQA(t *testing.T) {
	s := newSite(t)
	s.enrol("office", "office", "")
	annIntro := s.enrol("ann", "inspector", "")
	kimDevice := id()
	kimIntro := s.enrol("kim", "inspector", kimDevice)
	test, te := s.auditRecord(s.auditContent(passDry, 100), "")
	review := func(by string) ledger.Signed {
		return s.add(by, &ledger.TestReviewed{TestID: test, Revision: te.Event.ID, Decision: ledger.Approve})
	}
	review("office") // none
	byAnn := review("ann")
	byBob := review("bob")
	byKim := review("kim")
	s.enrol("kim", "office", kimDevice) // kim moves to the office
	review("kim")                       // none: office by now
	checkFindings(t, Findings(s.p, AuditOptions{}), ReviewerNotOfficeOrQA,
		wantFinding{test, []string{byAnn.Event.ID, annIntro.Event.ID}, []string{"approved", "by user ann, whose role on the project then was inspector"}},
		wantFinding{test, []string{byBob.Event.ID}, []string{"by user bob, who had no role recorded on the project then"}},
		wantFinding{test, []string{byKim.Event.ID, kimIntro.Event.ID}, []string{"by user kim, whose role on the project then was inspector"}})
}

// Findings come in the order of the tests they concern, then by code; an
// entry not about a test by its own time; every code has a title.
func TestFindingsOrder(t *testing.T) {
	s := newSite(t)
	lift2 := id()
	s.add("office", &ledger.LiftPlacementRecorded{ID: lift2, Feature: "embankment", LiftNumber: 2, Thickness: 0.2, CompactedVolume: 1000, BorrowSourceID: s.borrow})
	p, _ := s.auditRecord(s.auditContent(passDry, 100), "")
	far := s.auditContent(passDry, 150)
	far.PlacementID = lift2
	r, re := s.auditRecord(far, p) // away, on another lift, retesting a pass
	spec := s.add("qa", &ledger.SpecDefined{ID: id(), Name: "subgrade", MinCompaction: "98"})
	early, _ := s.auditRecord(s.auditContent(failDry, 10), "")
	fs := Findings(s.p, AuditOptions{AsOf: s.clock.Add(72 * time.Hour), Skews: map[string]int64{re.Event.ID: 4e8, spec.Event.ID: 4e8}})
	type key struct {
		code FindingCode
		test string
	}
	var got []key
	for _, f := range fs {
		got = append(got, key{f.Code, f.TestID})
		if FindingTitle[f.Code] == "" {
			t.Errorf("%s has no title", f.Code)
		}
	}
	wantOrder := []key{{ClockSkew, r}, {PassingTestRetested, r}, {RetestAwayFromFailure, r}, {RetestOnOtherLift, r},
		{ClockSkew, ""}, {FailureNotRetested, early}}
	if !slices.Equal(got, wantOrder) {
		t.Errorf("order %v, want %v", got, wantOrder)
	}
	if len(FindingTitle) != 10 {
		t.Errorf("%d titles, want one per code (10)", len(FindingTitle))
	}
}

// auditStamp is how findings write a time (in the project's zone; these
// projects set none, so UTC).
const auditStamp = "2006-01-02 15:04 MST"

// Findings speak the project's language: distances in its units, times in
// its zone, people by the names the ledger introduces them with. In a US
// project on Denver time: a retest 20 m (65.6 ft) from its failure, against
// the default 10 m (32.8 ft); a retest of a passing test by Ann Ruiz; a
// failure left open, recorded at 15:xx UTC, which is 09:xx MDT.
func TestFindingsSpeakTheProjectsLanguage(t *testing.T) {
	s := newSite(t)
	s.add("admin", &ledger.ProjectSetUp{Name: "units", Units: soil.US, TimeZone: "America/Denver"})
	pub, _, _ := ed25519.GenerateKey(nil)
	s.add("server", &ledger.DeviceEnrolled{DeviceID: id(), UserID: "ann", UserName: "Ann Ruiz", PublicKey: pub, Role: "inspector", Enrolled: s.clock})
	f, _ := s.auditRecord(s.auditContent(failDry, 100), "")
	s.auditRecord(s.auditContent(passDry, 120), f)
	p, _ := s.auditRecord(s.auditContent(passDry, 300), "")
	s.auditRecord(s.auditContent(passDry, 300), p)
	g, _ := s.auditRecord(s.auditContent(failDry, 500), "")
	msgs := map[FindingCode]string{}
	for _, fd := range Findings(s.p, AuditOptions{AsOf: s.clock.Add(100 * time.Hour)}) {
		if fd.TestID != g || fd.Code == FailureNotRetested {
			msgs[fd.Code] = fd.Message
		}
	}
	for code, want := range map[FindingCode][]string{
		RetestAwayFromFailure: {"is 65.6 ft from test", "retest distance of 32.8 ft"},
		PassingTestRetested:   {"by Ann Ruiz retests test " + shortRef(p)},
		FailureNotRetested:    {"at 2026-07-01 09:", " MDT by its device's clock", "still open 4 d 4 h later"},
	} {
		for _, w := range want {
			if !strings.Contains(msgs[code], w) {
				t.Errorf("%s: message %q lacks %q", code, msgs[code], w)
			}
		}
	}
}
