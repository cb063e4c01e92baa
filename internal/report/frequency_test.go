package report

import (
	"math"
	"slices"
	"testing"

	"tamp/internal/ledger"
	"tamp/internal/soil"
)

// placed records a lift of the embankment against spec and returns its id.
func (s *site) placed(spec string, lift uint32, edit func(*ledger.LiftPlacementRecorded)) string {
	s.t.Helper()
	k := &ledger.LiftPlacementRecorded{ID: id(), Feature: "embankment", LiftNumber: lift, Thickness: 0.2, CompactedVolume: 1380, SpecID: spec}
	if edit != nil {
		edit(k)
	}
	s.add("office", k)
	return k.ID
}

// defined records a spec with the frequency rules edit sets and returns its
// id.
func (s *site) defined(edit func(*ledger.SpecDefined)) string {
	s.t.Helper()
	k := &ledger.SpecDefined{ID: id(), Name: "rules", MinCompaction: "95"}
	edit(k)
	s.add("qa", k)
	return k.ID
}

func frequencyOf(fs []Frequency, placement, spec string) (Frequency, bool) {
	for _, f := range fs {
		if f.Placement.ID == placement && f.SpecID == spec {
			return f, true
		}
	}
	return Frequency{}, false
}

// Each rule alone, and the most of several, worked by hand from the
// formula (one test per so much, rounded up). The lift: stations 1000 to
// 1250 m (250 m), offsets -6 to +6 m (12 m wide, so 3,000 m2 of plan
// area), 1,380 m3 compacted. None of these placements has a test: each
// appears with none taken.
func TestFrequencyRules(t *testing.T) {
	s := newSite(t)
	stations := func(k *ledger.LiftPlacementRecorded) {
		k.Stations = &ledger.StationRange{From: 1000, To: 1250, OffsetLeft: -6, OffsetRight: 6}
	}
	type want struct {
		kind     RuleKind
		quantity float64
		required int
		applies  bool
	}
	cases := []struct {
		name      string
		spec      func(*ledger.SpecDefined)
		placement func(*ledger.LiftPlacementRecorded)
		rules     []want
		required  int
	}{
		// 1,380 / 400 = 3.45 -> 4.
		{"volume", func(k *ledger.SpecDefined) { k.VolumePerTest = 400 }, stations,
			[]want{{VolumeRule, 1380, 4, true}}, 4},
		// The area recorded wins over the stations: 2,400 / 1,000 = 2.4 -> 3.
		{"area recorded", func(k *ledger.SpecDefined) { k.AreaPerTest = 1000 },
			func(k *ledger.LiftPlacementRecorded) { stations(k); k.Area = 2400 },
			[]want{{AreaRule, 2400, 3, true}}, 3},
		// From the stations: 250 x 12 = 3,000 m2 / 800 = 3.75 -> 4.
		{"area from stations", func(k *ledger.SpecDefined) { k.AreaPerTest = 800 }, stations,
			[]want{{AreaRule, 3000, 4, true}}, 4},
		// 250 / 100 = 2.5 -> 3.
		{"length", func(k *ledger.SpecDefined) { k.LengthPerTest = 100 }, stations,
			[]want{{LengthRule, 250, 3, true}}, 3},
		{"per lift", func(k *ledger.SpecDefined) { k.MinTestsPerLift = 2 }, stations,
			[]want{{PerLiftRule, 1, 2, true}}, 2},
		// Volume 4, area 3,000 / 500 = 6, length 3, per lift 2: the most is
		// the area's 6.
		{"most of several", func(k *ledger.SpecDefined) {
			k.VolumePerTest, k.AreaPerTest, k.LengthPerTest, k.MinTestsPerLift = 400, 500, 100, 2
		}, stations, []want{{VolumeRule, 1380, 4, true}, {AreaRule, 3000, 6, true}, {LengthRule, 250, 3, true}, {PerLiftRule, 1, 2, true}}, 6},
		// No stations: the length and area rules cannot be applied, and say so.
		{"length and area unknown", func(k *ledger.SpecDefined) { k.VolumePerTest, k.AreaPerTest, k.LengthPerTest = 400, 500, 100 }, nil,
			[]want{{VolumeRule, 1380, 4, true}, {AreaRule, 0, 0, false}, {LengthRule, 0, 0, false}}, 4},
		// Stations with no width: the area rule cannot be applied.
		{"no width", func(k *ledger.SpecDefined) { k.AreaPerTest = 500 },
			func(k *ledger.LiftPlacementRecorded) { k.Stations = &ledger.StationRange{From: 1000, To: 1250} },
			[]want{{AreaRule, 0, 0, false}}, 0},
	}
	placements := make([]string, len(cases))
	specs := make([]string, len(cases))
	for i, c := range cases {
		specs[i] = s.defined(c.spec)
		placements[i] = s.placed(specs[i], uint32(i+1), c.placement)
	}
	noRules := s.defined(func(*ledger.SpecDefined) {})
	bare := s.placed(noRules, 99, nil)
	fs := TestFrequency(s.p)
	for i, c := range cases {
		f, ok := frequencyOf(fs, placements[i], specs[i])
		if !ok {
			t.Errorf("%s: the placement with a spec and no test is missing", c.name)
			continue
		}
		if f.Required != c.required || f.Taken != 0 || f.Shortfall != c.required {
			t.Errorf("%s: required %d, taken %d, shortfall %d; want %d, 0, %d", c.name, f.Required, f.Taken, f.Shortfall, c.required, c.required)
		}
		if len(f.Rules) != len(c.rules) {
			t.Errorf("%s: rules %+v, want %+v", c.name, f.Rules, c.rules)
			continue
		}
		for j, w := range c.rules {
			r := f.Rules[j]
			if r.Kind != w.kind || math.Abs(r.Quantity-w.quantity) > 1e-9 || r.Required != w.required || r.Applies != w.applies {
				t.Errorf("%s: rule %d = %+v, want %+v", c.name, j, r, w)
			}
			if r.Applies != (r.Why == "") {
				t.Errorf("%s: rule %s applies %v with why %q: a rule not applied must say why", c.name, r.Kind, r.Applies, r.Why)
			}
		}
	}
	if _, ok := frequencyOf(fs, bare, noRules); ok {
		t.Errorf("a spec with no frequency rule gave a frequency")
	}
	if len(fs) != len(cases) {
		t.Errorf("%d frequencies, want %d", len(fs), len(cases))
	}
}

// An exact multiple does not round up, though its quotient in floating
// point lies above the integer: 3,500 yd3 at one test per 500 yd3 is 7
// tests (worked by hand from the formula).
func TestFrequencyExactMultiple(t *testing.T) {
	s := newSite(t)
	yd := soil.CubicYard // converted at run time, as entries in yd3 are
	per, placed := 500*yd, 3500*yd
	if placed/per <= 7 {
		t.Fatalf("3500 yd3 / 500 yd3 = %v in floating point: the case no longer tests the tolerance", placed/per)
	}
	spec := s.defined(func(k *ledger.SpecDefined) { k.VolumePerTest = per })
	pl := s.placed(spec, 1, func(k *ledger.LiftPlacementRecorded) { k.CompactedVolume = placed })
	f, ok := frequencyOf(TestFrequency(s.p), pl, spec)
	if !ok || f.Required != 7 || f.Rules[0].Required != 7 {
		t.Errorf("frequency %+v, want 7 tests required", f)
	}
}

// Only final tests count. On a placement of 1,800 yd3 against one test per
// 500 yd3 (4 tests, by hand), six tests: a pass; a failure and its passing
// retest (they count once, through the retest); a voided pass; a pass the
// office returned; a test whose reference has not arrived (not graded).
// Taken 2, shortfall 2. A second spec, named only by a voided test on the
// placement, applies too: 1,800 / 300 = 6 required, none taken.
func TestFrequencyCountsFinalTests(t *testing.T) {
	s := newSite(t)
	rc := func(pct float64) float64 { return 118 * pct / 100 }
	s.test(rc(96), 100, "")
	failed, _ := s.test(rc(90), 200, "")
	s.test(rc(97), 201, failed.TestID)
	voided, _ := s.test(rc(98), 300, "")
	s.add("ann", &ledger.TestVoided{TestID: voided.TestID, Reason: "wrong lift"})
	returned, re := s.test(rc(98), 400, "")
	s.add("office", &ledger.TestReviewed{TestID: returned.TestID, Revision: re.Event.ID, Decision: ledger.Return, Comment: "no method"})
	pending := s.content(rc(97), 12)
	pending.ReferenceID = id() // not on this replica
	s.record(pending, "")
	other := s.defined(func(k *ledger.SpecDefined) { k.VolumePerTest = 300 * soil.CubicYard })
	wrong := s.content(rc(97), 12)
	wrong.SpecID = other
	wt := s.record(wrong, "")
	s.add("ann", &ledger.TestVoided{TestID: wt.TestID, Reason: "wrong spec"})

	fs := TestFrequency(s.p)
	if len(fs) != 2 {
		t.Fatalf("%d frequencies, want 2: %+v", len(fs), fs)
	}
	if f, _ := frequencyOf(fs, s.place, s.spec); f.Required != 4 || f.Taken != 2 || f.Shortfall != 2 {
		t.Errorf("required %d, taken %d, shortfall %d; want 4, 2, 2", f.Required, f.Taken, f.Shortfall)
	}
	if f, _ := frequencyOf(fs, s.place, other); f.Required != 6 || f.Taken != 0 || f.Shortfall != 6 {
		t.Errorf("the spec of a voided test: required %d, taken %d; want 6, 0", f.Required, f.Taken)
	}
	// The test that was pending is graded when its reference arrives, and
	// counts.
	s.add("qa", &ledger.ReferenceAdded{ID: pending.ReferenceID, Procedure: soil.Procedure{Standard: soil.ASTMD698, Method: "A"},
		MaxDryDensity: pcf(118), OptimumMoisture: 12})
	if f, _ := frequencyOf(TestFrequency(s.p), s.place, s.spec); f.Taken != 3 {
		t.Errorf("after the reference arrived: taken %d, want 3", f.Taken)
	}
}

// A placement's own spec that no test names sits among the specs its
// tests name in id order, whatever the ids: the report is sorted by
// placement, then spec, each spec once.
func TestFrequencySpecsInIDOrder(t *testing.T) {
	for range 8 {
		s := newSite(t)
		rule := func(k *ledger.SpecDefined) { k.VolumePerTest = 100 }
		own, a, b := s.defined(rule), s.defined(rule), s.defined(rule)
		pl := s.placed(own, 7, nil)
		for _, spec := range []string{a, b, a} {
			c := s.content(118*0.97, 12)
			c.SpecID, c.PlacementID = spec, pl
			s.record(c, "")
		}
		var got []string
		for _, f := range TestFrequency(s.p) {
			if f.Placement.ID == pl {
				got = append(got, f.SpecID)
			}
		}
		want := []string{own, a, b}
		slices.Sort(want)
		if !slices.Equal(got, want) {
			t.Fatalf("specs of the placement %v, want %v", got, want)
		}
		if f, _ := frequencyOf(TestFrequency(s.p), pl, a); f.Taken != 2 {
			t.Errorf("spec named twice: taken %d, want 2", f.Taken)
		}
	}
}
