package report

import (
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"tamp/internal/ledger"
	"tamp/internal/qc"
	"tamp/internal/valid"
)

// content is a sand cone test of the site's placement against its spec and
// reference (118.0 pcf, optimum 12 %), at dry density dry (pcf) and
// moisture w (%).
func (s *site) content(dry, w float64) ledger.TestContent {
	return ledger.TestContent{Readings: cone(dry, w), ReferenceID: s.ref, SpecID: s.spec, PlacementID: s.place}
}

// record records c, retesting retestOf when set.
func (s *site) record(c ledger.TestContent, retestOf string) *ledger.TestRecorded {
	s.t.Helper()
	tr := &ledger.TestRecorded{TestID: id(), RetestOf: retestOf, Content: c}
	s.add("ann", tr)
	return tr
}

// rc is the dry density, pcf, of a relative compaction against the site's
// 118.0 pcf.
func rc(pct float64) float64 { return 118 * pct / 100 }

func approx(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if math.IsNaN(got) || math.Abs(got-want) > tol {
		t.Errorf("%s = %v, want %v (within %v)", what, got, want, tol)
	}
}

func oneLot(t *testing.T, p *ledger.Projection, scope LotScope) Lot {
	t.Helper()
	lots, err := Lots(p, scope)
	if err != nil {
		t.Fatal(err)
	}
	if len(lots) != 1 {
		t.Fatalf("%d lots, want 1: %+v", len(lots), lots)
	}
	return lots[0]
}

// E4 [formula] (CHECKS.md): relative compaction 96.0, 97.5, 94.5, 98.0,
// 95.5 against a minimum of 95: mean 96.3, s 1.4405, Q_L 0.9025, PWL 80.70.
// One lift, the default scope.
func TestLotE4(t *testing.T) {
	s := newSite(t)
	for _, v := range []float64{96.0, 97.5, 94.5, 98.0, 95.5} {
		s.record(s.content(rc(v), 12), "")
	}
	l := oneLot(t, s.p, LotScope{})
	if l.Name != "embankment lift 1" || l.Feature != "embankment" || l.Placement == nil || l.Placement.ID != s.place || l.SpecID != s.spec {
		t.Errorf("lot %q of %q, placement %v, spec %s", l.Name, l.Feature, l.Placement, l.SpecID)
	}
	if l.Compaction == nil || l.Compaction.PWL == nil {
		t.Fatalf("no compaction estimate: %+v (why %q)", l.Compaction, l.Why)
	}
	e := l.Compaction.PWL
	approx(t, "E4 mean", e.Mean, 96.3, 1e-9)
	approx(t, "E4 s", e.StdDev, 1.4405, 0.0001)
	approx(t, "E4 Q_L", e.QualityLower, 0.9025, 0.0001)
	approx(t, "E4 PWL", e.PWL, 80.70, 0.05)
	if l.Compaction.Lower == nil || *l.Compaction.Lower != 95 || l.Compaction.Upper != nil {
		t.Errorf("compaction limits %v, %v; want a lower limit of 95 only", l.Compaction.Lower, l.Compaction.Upper)
	}
	if l.Acceptance != NoAcceptanceLimit || l.AcceptancePWL != 0 {
		t.Errorf("acceptance %s at %v, want %s", l.Acceptance, l.AcceptancePWL, NoAcceptanceLimit)
	}
}

// Lots hold final tests only. Eight tests on one placement against a 95 %
// minimum: four count (RC 96.0, 97.5, 95.0 and 95.5, the last a retest
// that closed a failure at 89.0); the failure it closed, a test the office
// returned (98.0), a voided one (85.0) and one whose reference has not
// arrived are left out, each with its reason.
//
// By hand, percent within limits (AASHTO R 9; the beta-distribution
// estimator of FHWA Technical Advisory T 5080.12 that internal/qc uses):
// n = 4, mean = (96.0 + 97.5 + 95.0 + 95.5) / 4 = 96.0, deviations 0, 1.5,
// -1.0, -0.5, s = sqrt((0 + 2.25 + 1.0 + 0.25) / 3) = sqrt(7/6) = 1.0801,
// Q = (96.0 - 95) / s = 0.9258. With n = 4 the beta distribution is
// uniform (b = (n - 2) / 2 = 1), so PWL = 100 x = 100 (1/2 + Q sqrt(4) /
// (2 (4 - 1))) = 100 (0.5 + 0.9258 / 3) = 80.86 (CHECKS.md E6 closed form).
func TestLotsFinalTestsOnly(t *testing.T) {
	s := newSite(t)
	s.test(rc(96.0), 100, "")
	s.test(rc(97.5), 150, "")
	s.test(rc(95.0), 175, "")
	failed, _ := s.test(rc(89.0), 200, "")
	retest, _ := s.test(rc(95.5), 201, failed.TestID)
	returned, re := s.test(rc(98.0), 300, "")
	s.add("office", &ledger.TestReviewed{TestID: returned.TestID, Revision: re.Event.ID, Decision: ledger.Return, Comment: "wet density has no method"})
	voided, _ := s.test(rc(85.0), 400, "")
	s.add("ann", &ledger.TestVoided{TestID: voided.TestID, Reason: "tested the wrong lift"})
	c := s.content(rc(97.0), 12)
	c.ReferenceID = id() // not on this replica: not graded
	pending := s.record(c, "")

	l := oneLot(t, s.p, LotScope{})
	e := l.Compaction.PWL
	if e == nil {
		t.Fatalf("no estimate: %q", l.Why)
	}
	if e.N != 4 || math.Abs(e.Mean-96.0) > 1e-9 || math.Abs(e.StdDev-math.Sqrt(7.0/6)) > 1e-9 {
		t.Errorf("n %d, mean %v, s %v; want 4, 96.0, %v", e.N, e.Mean, e.StdDev, math.Sqrt(7.0/6))
	}
	q := 1 / math.Sqrt(7.0/6)
	if math.Abs(e.QualityLower-q) > 1e-9 || math.Abs(e.PWL-100*(0.5+q/3)) > 1e-9 || math.Abs(e.PWL-80.86) > 0.005 {
		t.Errorf("Q %v, PWL %v; want %v and %v", e.QualityLower, e.PWL, q, 100*(0.5+q/3))
	}
	if len(l.Tests) != 4 || l.Tests[3].ID != retest.TestID || len(l.Compaction.Values) != 4 || math.Abs(l.Compaction.Values[3]-95.5) > 1e-9 {
		t.Errorf("values %v: the retest (95.5) should count, last", l.Compaction.Values)
	}
	want := []LeftOut{
		{TestID: failed.TestID, Reason: ReworkedAndRetested, ReplacedBy: retest.TestID},
		{TestID: returned.TestID, Reason: ReturnedByOffice},
		{TestID: voided.TestID, Reason: VoidedTest},
		{TestID: pending.TestID, Reason: NotGraded},
	}
	if len(l.LeftOut) != len(want) {
		t.Fatalf("left out %+v, want %+v", l.LeftOut, want)
	}
	for i, w := range want {
		if got := l.LeftOut[i]; got != w {
			t.Errorf("left out[%d] = %+v, want %+v", i, got, w)
		}
	}
}

// A retest the office returned closes nothing: the failure it retested
// stays in the lot, the retest is left out.
func TestLotsReturnedRetestClosesNothing(t *testing.T) {
	s := newSite(t)
	s.test(rc(96.0), 100, "")
	s.test(rc(97.0), 150, "")
	failed, _ := s.test(rc(93.0), 200, "")
	retest, re := s.test(rc(99.0), 201, failed.TestID)
	s.add("office", &ledger.TestReviewed{TestID: retest.TestID, Revision: re.Event.ID, Decision: ledger.Return, Comment: "no count"})
	l := oneLot(t, s.p, LotScope{})
	if l.Compaction.PWL == nil || l.Compaction.PWL.N != 3 || math.Abs(l.Compaction.PWL.Mean-286.0/3) > 1e-9 {
		t.Fatalf("lot %+v, want the three originals (mean 95.33)", l.Compaction)
	}
	if lo := l.LeftOut; len(lo) != 1 || lo[0].TestID != retest.TestID || lo[0].Reason != ReturnedByOffice {
		t.Errorf("left out %+v, want only the returned retest", lo)
	}
}

// A lot of two final results is returned, with its values and no
// estimate, so that it is seen.
// With an acceptance limit it is not estimated; without, there is
// nothing to decide.
func TestLotOfTwoResults(t *testing.T) {
	for _, c := range []struct {
		limit float64
		want  Acceptance
	}{{90, NotEstimated}, {0, NoAcceptanceLimit}} {
		s := newSite(t)
		s.spec = id()
		s.add("qa", &ledger.SpecDefined{ID: s.spec, Name: "embankment", MinCompaction: "95", MoistureLow: "-3", MoistureHigh: "3", LotAcceptancePWL: c.limit})
		s.record(s.content(rc(96.0), 12), "")
		s.record(s.content(rc(97.0), 13), "")
		l := oneLot(t, s.p, LotScope{})
		if l.Compaction == nil || len(l.Compaction.Values) != 2 || l.Compaction.PWL != nil || l.Moisture == nil || l.Moisture.PWL != nil {
			t.Errorf("compaction %+v, moisture %+v: want two values and no estimate", l.Compaction, l.Moisture)
		}
		if !strings.Contains(l.Why, "too few") || l.Acceptance != c.want {
			t.Errorf("limit %v: why %q, acceptance %s; want too few results, %s", c.limit, l.Why, l.Acceptance, c.want)
		}
	}
}

// acceptanceSite records, against a spec with a minimum of 95 %, a window
// of -2 to +2 points from optimum and the given acceptance limit, five
// tests that pair E4's relative compactions (96.0, 97.5, 94.5, 98.0, 95.5)
// with E5's moisture deviations (-1.2, 0.4, 1.5, -0.3, 2.4; optimum 12 %).
func acceptanceSite(t *testing.T, limit float64) *site {
	s := newSite(t)
	s.spec = id()
	s.add("qa", &ledger.SpecDefined{ID: s.spec, Name: "embankment", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "+2", LotAcceptancePWL: limit})
	rcs := []float64{96.0, 97.5, 94.5, 98.0, 95.5}
	devs := []float64{-1.2, 0.4, 1.5, -0.3, 2.4}
	for i := range rcs {
		s.record(s.content(rc(rcs[i]), 12+devs[i]), "")
	}
	return s
}

// Moisture in points of optimum, E5 [formula] (CHECKS.md): deviations
// -1.2, 0.4, 1.5, -0.3, 2.4 against -2 / +2: Q_U 1.010, Q_L 1.795, PWL
// 83.93. Acceptance worked by hand against the limit: compaction 80.70
// (E4) and moisture 83.93 both reach 80 (accepted); 82 rejects on
// compaction alone; 85 on both.
func TestLotAcceptance(t *testing.T) {
	for _, c := range []struct {
		limit       float64
		want        Acceptance
		compaction  bool // named in Why
		moistureToo bool
	}{
		{0, NoAcceptanceLimit, false, false},
		{80, Accepted, false, false},
		{82, Rejected, true, false},
		{85, Rejected, true, true},
	} {
		l := oneLot(t, acceptanceSite(t, c.limit).p, LotScope{})
		if l.Moisture == nil || l.Moisture.PWL == nil || l.Compaction == nil || l.Compaction.PWL == nil {
			t.Fatalf("limit %v: no estimates (%q)", c.limit, l.Why)
		}
		m := l.Moisture.PWL
		approx(t, "E5 Q_U", m.QualityUpper, 1.010, 0.0005)
		approx(t, "E5 Q_L", m.QualityLower, 1.795, 0.0005)
		approx(t, "E5 PWL", m.PWL, 83.93, 0.05)
		if *l.Moisture.Lower != -2 || *l.Moisture.Upper != 2 {
			t.Errorf("moisture window %v to %v, want -2 to 2", *l.Moisture.Lower, *l.Moisture.Upper)
		}
		approx(t, "E4 PWL", l.Compaction.PWL.PWL, 80.70, 0.05)
		if l.Acceptance != c.want || l.AcceptancePWL != c.limit {
			t.Errorf("limit %v: %s, want %s", c.limit, l.Acceptance, c.want)
		}
		if strings.Contains(l.Why, "relative compaction") != c.compaction || strings.Contains(l.Why, "moisture") != c.moistureToo {
			t.Errorf("limit %v: why %q", c.limit, l.Why)
		}
	}
}

// Moisture as a percent of optimum (12 %): moistures 11.4, 12.0, 12.6,
// 13.2 % are 95, 100, 105 and 110 % of optimum, against a window of 95 to
// 110 %. Worked by hand from the formula (CHECKS.md E6, n = 4 closed form
// PWL = 50 + 100 Q / 3): mean 102.5, s = sqrt((7.5^2 + 2.5^2 + 2.5^2 +
// 7.5^2) / 3) = sqrt(125 / 3) = 6.4550, Q_L = Q_U = 7.5 / 6.4550 = 1.1619,
// PWL_L = PWL_U = 88.730, PWL = 88.730 + 88.730 - 100 = 77.460 (E7).
// The spec sets no minimum compaction: no compaction characteristic.
func TestLotMoisturePercentOfOptimum(t *testing.T) {
	s := newSite(t)
	s.spec = id()
	s.add("qa", &ledger.SpecDefined{ID: s.spec, Name: "pad", MoistureBasis: qc.PercentOfOptimum, MoistureLow: "95", MoistureHigh: "110", LotAcceptancePWL: 75})
	for _, w := range []float64{11.4, 12.0, 12.6, 13.2} {
		s.record(s.content(rc(96), w), "")
	}
	l := oneLot(t, s.p, LotScope{})
	if l.Compaction != nil {
		t.Errorf("compaction %+v, want none: the spec sets no minimum", l.Compaction)
	}
	if l.Moisture == nil || l.Moisture.PWL == nil {
		t.Fatalf("no moisture estimate (%q)", l.Why)
	}
	m := l.Moisture.PWL
	for i, v := range []float64{95, 100, 105, 110} {
		approx(t, "percent of optimum", l.Moisture.Values[i], v, 1e-9)
	}
	approx(t, "mean", m.Mean, 102.5, 1e-9)
	approx(t, "s", m.StdDev, math.Sqrt(125.0/3), 1e-9)
	approx(t, "Q_L", m.QualityLower, 1.1619, 0.0001)
	approx(t, "PWL_L", m.PWLLower, 88.730, 0.001)
	approx(t, "PWL_U", m.PWLUpper, 88.730, 0.001)
	approx(t, "PWL", m.PWL, 77.460, 0.001)
	if l.Acceptance != Accepted {
		t.Errorf("acceptance %s at 75 %%, want %s", l.Acceptance, Accepted)
	}
}

// Lots of one feature over a range of lifts and over a range of days. The
// embankment's lifts 1 to 4 are tested on 1 to 4 July, one lift a day; the
// pad's lift 2 on 2 July; a test that names no placement gives its own
// feature and lift (embankment, 3).
//
//	1 July  lift 1  97.0
//	2 July  lift 2  96.0, 97.5    pad lift 2  99.0
//	3 July  lift 3  94.5, 98.0    (no placement, lift 3)  95.5
//	4 July  lift 4  93.0
//
// Lifts 2 to 3: 96.0, 97.5, 94.5, 98.0, 95.5, E4 [formula]: PWL 80.70.
// 3 to 4 July: 94.5, 98.0, 95.5, 93.0; worked by hand from the formula
// (E6 closed form, n = 4): mean 95.25, s = sqrt((0.5625 + 7.5625 + 0.0625
// + 5.0625) / 3) = sqrt(13.25 / 3) = 2.1016, Q = 0.25 / 2.1016 = 0.11896,
// PWL = 50 + 100 Q / 3 = 53.965.
func TestLotScopes(t *testing.T) {
	s := newSite(t)
	other := id()
	s.add("qa", &ledger.SpecDefined{ID: other, Name: "other", MinCompaction: "90"})
	day := func(d int) { s.clock = time.Date(2026, 7, d, 15, 0, 0, 0, time.UTC) }
	lift := func(feature string, n uint32) string {
		return s.placed("", n, func(k *ledger.LiftPlacementRecorded) { k.Feature = feature })
	}
	on := func(pl string, v float64) *ledger.TestRecorded {
		c := s.content(rc(v), 12)
		c.PlacementID = pl
		if pl == "" {
			c.Feature, c.LiftNumber = "embankment", 3
		}
		return s.record(c, "")
	}
	l1, l2, l3, l4, pad := lift("embankment", 1), lift("embankment", 2), lift("embankment", 3), lift("embankment", 4), lift("pad", 2)
	day(1)
	on(l1, 97.0)
	day(2)
	on(l2, 96.0)
	on(l2, 97.5)
	on(pad, 99.0)
	c := s.content(rc(99), 12)
	c.PlacementID, c.SpecID = l2, other
	s.record(c, "")
	day(3)
	on(l3, 94.5)
	on(l3, 98.0)
	on("", 95.5)
	day(4)
	on(l4, 93.0)

	lots, err := Lots(s.p, LotScope{Feature: "embankment", LiftFrom: 2, LiftTo: 3})
	if err != nil {
		t.Fatal(err)
	}
	if len(lots) != 2 {
		t.Fatalf("%d lots of lifts 2-3, want 2 (one per spec)", len(lots))
	}
	var main, second Lot
	for _, l := range lots {
		if l.SpecID == s.spec {
			main = l
		} else {
			second = l
		}
	}
	if main.Name != "embankment lifts 2–3" || main.Feature != "embankment" || main.Placement != nil {
		t.Errorf("lot %q of %q, placement %v", main.Name, main.Feature, main.Placement)
	}
	if main.Compaction == nil || main.Compaction.PWL == nil {
		t.Fatalf("lifts 2-3: no estimate (%q)", main.Why)
	}
	approx(t, "lifts 2-3 n", float64(main.Compaction.PWL.N), 5, 0)
	approx(t, "lifts 2-3 PWL (E4)", main.Compaction.PWL.PWL, 80.70, 0.05)
	if second.SpecID != other || len(second.Tests) != 1 || second.Compaction.PWL != nil || second.Why == "" {
		t.Errorf("the other spec's lot: %+v", second)
	}

	l := oneLot(t, s.p, LotScope{Feature: "embankment", DayFrom: "2026-07-03", DayTo: "2026-07-04"})
	if l.Name != "embankment, 2026-07-03 to 2026-07-04" {
		t.Errorf("name %q", l.Name)
	}
	if l.Compaction.PWL == nil {
		t.Fatalf("3-4 July: no estimate (%q)", l.Why)
	}
	e := l.Compaction.PWL
	approx(t, "3-4 July n", float64(e.N), 4, 0)
	approx(t, "3-4 July mean", e.Mean, 95.25, 1e-9)
	approx(t, "3-4 July s", e.StdDev, math.Sqrt(13.25/3), 1e-9)
	approx(t, "3-4 July PWL", e.PWL, 53.965, 0.001)

	// The pad is another feature; a lift and a day bound at once.
	l = oneLot(t, s.p, LotScope{Feature: "pad"})
	if l.Name != "pad" || len(l.Tests) != 1 || l.Tests[0].Content.PlacementID != pad {
		t.Errorf("pad lot %q with %d tests", l.Name, len(l.Tests))
	}
	lots, err = Lots(s.p, LotScope{Feature: "embankment", LiftFrom: 3, DayFrom: "2026-07-04"})
	if err != nil || len(lots) != 1 || len(lots[0].Tests) != 1 || lots[0].Name != "embankment lifts 3 and above, from 2026-07-04" {
		t.Errorf("lift 3 and above from 4 July: %v, %+v", err, lots)
	}
}

// A scope that breaks a rule is refused, naming the field.
func TestLotScopeInvalid(t *testing.T) {
	s := newSite(t)
	for _, c := range []struct {
		scope LotScope
		field string
	}{
		{LotScope{Feature: "embankment", LiftFrom: 5, LiftTo: 2}, "lift_from"},
		{LotScope{Feature: "embankment", DayFrom: "2026-7-1"}, "day_from"},
		{LotScope{Feature: "embankment", DayTo: "2026-02-30"}, "day_to"},
		{LotScope{Feature: "embankment", DayFrom: "2026-07-08", DayTo: "2026-07-01"}, "day_from"},
		{LotScope{LiftFrom: 2}, "feature"},
	} {
		_, err := Lots(s.p, c.scope)
		var fe *valid.FieldError
		if !errors.Is(err, valid.ErrInput) || !errors.As(err, &fe) || fe.Field != c.field || !strings.HasPrefix(err.Error(), "report: lots: ") {
			t.Errorf("%+v: error %v, want a report: lots: error naming %s", c.scope, err, c.field)
		}
	}
}
