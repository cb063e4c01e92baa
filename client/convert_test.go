package client

import (
	"reflect"
	"testing"

	"github.com/google/go-cmp/cmp"

	"tamp/internal/ledger"
	"tamp/internal/qc"
	"tamp/internal/report"
	"tamp/internal/soil"
)

func fptr(v float64) *float64 { return &v }

// everyMethod holds readings of every in-place method, each field set to a
// distinct value so that a field dropped or swapped on the way shows.
var everyMethod = map[string]Readings{
	"nuclear direct, two readings at 90 degrees": {Nuclear: &NuclearGauge{ProbeDepth: 0.2,
		Readings:  []GaugeReading{{WetDensity: 2011, WaterPerVolume: 201}, {WetDensity: 2019, WaterPerVolume: 203}},
		Agreement: 30, CorrectionID: "0190a3c4-0000-7000-8000-000000000001"}},
	"nuclear backscatter, oven moisture": {Nuclear: &NuclearGauge{Backscatter: true,
		Readings: []GaugeReading{{WetDensity: 1990, WaterPerVolume: 180}}, OvenMoisture: fptr(11.3)}},
	"sand cone, sand used":        {SandCone: &SandCone{SandDensity: 1586, SandUsed: 3.18, ConeCorrection: 0.24, SoilMass: 3.68, Moisture: 12.1}},
	"sand cone, before, after":    {SandCone: &SandCone{SandDensity: 1590, InitialMass: 7.2, FinalMass: 4.1, ConeCorrection: 0.25, SoilMass: 3.7, Moisture: 11.9}},
	"drive cylinder":              {DriveCylinder: &DriveCylinder{Diameter: 0.1016, Length: 0.127, SoilMass: 2.05, Moisture: 14.2}},
	"rubber balloon":              {RubberBalloon: &RubberBalloon{InitialReading: 0.0003, FinalReading: 0.0021, SoilMass: 3.9, Moisture: 10.4}},
	"wet density as measured":     {WetDensity: &MeasuredDensity{WetDensity: 2055, Moisture: 9.8}},
	"nothing (a bank test blank)": {},
}

// The readings of every method survive client -> ledger -> client whole,
// and the ledger's side holds the values entered.
func TestReadingsRoundTrip(t *testing.T) {
	for name, r := range everyMethod {
		t.Run(name, func(t *testing.T) {
			l := r.ledger()
			if got := readingsOf(l); !cmp.Equal(got, r) {
				t.Errorf("round trip changed the readings:\n%s", cmp.Diff(r, got))
			}
			// And ledger -> client -> ledger, so nothing the ledger holds
			// is lost when a device edits a revision it pulled.
			if back := readingsOf(l).ledger(); !cmp.Equal(back, l) {
				t.Errorf("ledger readings changed:\n%s", cmp.Diff(l, back))
			}
		})
	}
	// The values reach the ledger's fields, not merely survive.
	l := everyMethod["nuclear direct, two readings at 90 degrees"].ledger()
	if n := l.Nuclear; n == nil || len(n.Counts) != 2 || n.Counts[1].WetDensity != 2019 || n.Counts[1].WaterPerVolume != 203 ||
		n.ProbeDepth != 0.2 || n.Agreement != 30 || n.Backscatter {
		t.Errorf("nuclear readings in the ledger: %+v", n)
	}
	if c := everyMethod["sand cone, before, after"].ledger().SandCone; c == nil || c.InitialMass != 7.2 || c.FinalMass != 4.1 || c.SandUsed != 0 {
		t.Errorf("sand cone in the ledger: %+v", c)
	}
}

// Values handed back do not alias the ledger's: changing them leaves the
// projection's record as it was.
func TestReadingsOfCopies(t *testing.T) {
	l := everyMethod["nuclear backscatter, oven moisture"].ledger()
	r := readingsOf(l)
	*r.Nuclear.OvenMoisture = 99
	r.Nuclear.Readings[0].WetDensity = 1
	if *l.Nuclear.OvenMoisture != 11.3 || l.Nuclear.Counts[0].WetDensity != 1990 {
		t.Errorf("the ledger's readings changed with the copy: %+v", l.Nuclear)
	}
}

func TestReadingsMethod(t *testing.T) {
	want := map[string]Method{
		"nuclear direct, two readings at 90 degrees": NuclearDirect, "nuclear backscatter, oven moisture": NuclearBackscatter,
		"sand cone, sand used": SandConeMethod, "sand cone, before, after": SandConeMethod, "drive cylinder": DriveCylinderMethod,
		"rubber balloon": RubberBalloonMethod, "wet density as measured": MeasuredWetDensity, "nothing (a bank test blank)": "",
	}
	for name, r := range everyMethod {
		if got := r.Method(); got != want[name] {
			t.Errorf("%s: Method()=%q, want %q", name, got, want[name])
		}
		if got := methodOf(r.ledger()); got != want[name] {
			t.Errorf("%s: methodOf()=%q, want %q", name, got, want[name])
		}
		// The words are the ones the arithmetic reports.
		if name == "nothing (a bank test blank)" {
			continue
		}
		in, err := r.ledger().Compute(&soil.MoistureCorrection{Kind: soil.Offset, Value: 0.5})
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if string(in.Method) != string(want[name]) {
			t.Errorf("%s: the arithmetic says %q, Method() %q", name, in.Method, want[name])
		}
	}
}

// A test's whole content, with location, position and oversize, survives
// the round trip, so a correction keeps every field it does not edit.
func TestTestInputRoundTrip(t *testing.T) {
	in := TestInput{Project: "0190a3c4-0000-7000-8000-0000000000aa", Readings: everyMethod["drive cylinder"],
		Location: Location{Station: 125.3, Offset: -4.5, Elevation: 311.2, Description: "toe of the east slope",
			Position: &GeoPosition{Latitude: 39.7392, Longitude: -104.9903, Accuracy: 3.5}},
		PlacementID: "p", Feature: "embankment", LiftNumber: 7, LiftThickness: 0.2, ReferenceID: "r", SpecID: "s", EquipmentID: "e",
		Oversize: &Oversize{Percent: 12, BulkSpecificGravity: 2.65, Moisture: 1.5}, Remarks: "wet spot"}
	c := in.content()
	if got := inputOf(in.Project, c); !cmp.Equal(got, in) {
		t.Errorf("round trip changed the test:\n%s", cmp.Diff(in, got))
	}
	if c.Oversize == nil || c.Oversize.BulkGs != 2.65 || c.Location.Position == nil || c.Location.Position.Accuracy != 3.5 {
		t.Errorf("ledger content: %+v", c)
	}
	// Every field of the ledger's content but the device's results is
	// reached: a field added there and not here fails this count.
	if n, want := reflect.TypeFor[ledger.TestContent]().NumField(), reflect.TypeFor[TestInput]().NumField(); n != want {
		t.Errorf("ledger.TestContent has %d fields, TestInput %d (Project in, DeviceResults out): a field is not converted", n, want)
	}
}

func TestPlacementRoundTrip(t *testing.T) {
	p := Placement{ID: "p", Feature: "pad", LiftNumber: 3, Stations: &StationRange{From: 100, To: 160, OffsetLeft: 12, OffsetRight: 14},
		Area: 1500, Thickness: 0.25, CompactedVolume: 375, BorrowSourceID: "b", PlacedOn: "2026-09-14"}
	if got := placementOf(&ledger.Placement{LiftPlacementRecorded: *p.kind()}); !cmp.Equal(got, p) {
		t.Errorf("round trip changed the placement:\n%s", cmp.Diff(p, got))
	}
}

// A word the ledger has no value for is refused as invalid, naming the
// field, and each word maps to a distinct value.
func TestChoicesRefuseUnknownWords(t *testing.T) {
	for name, err := range map[string]error{
		"units":           func() error { _, err := ProjectSetUp{Units: "imperial"}.kind(); return err }(),
		"shrinkage":       func() error { _, err := ProjectSetUp{Shrinkage: "loose"}.kind(); return err }(),
		"moisture_basis":  func() error { _, err := Spec{MoistureBasis: "ratio"}.kind(); return err }(),
		"kind":            func() error { _, err := Equipment{Kind: "level"}.kind(); return err }(),
		"correction.kind": func() error { _, err := MoistureCorrection{Kind: "table"}.kind(); return err }(),
		"decision":        func() error { _, err := Decision("maybe").ledger(); return err }(),
	} {
		wantEntryError(t, name, err, ErrInvalid, "invalid_field", name, "")
	}
	distinct := func(name string, n, values int) {
		if n != values {
			t.Errorf("%s: %d words map to %d values", name, n, values)
		}
	}
	seen := map[ledger.EquipmentKind]bool{}
	for _, v := range equipmentToLedger {
		seen[v] = true
	}
	distinct("equipment", len(equipmentToLedger), len(seen))
	if _, err := (Equipment{Kind: Balance}).kind(); err != nil {
		t.Error(err)
	}
	for d := range decisionToLedger {
		k, _ := d.ledger()
		if decisionOf(k) != d {
			t.Errorf("decision %q comes back as %q", d, decisionOf(k))
		}
	}
	for _, u := range []Units{"", SI, USCustomary} {
		if _, err := (ProjectSetUp{Units: u}).kind(); err != nil {
			t.Errorf("units %q: %v", u, err)
		}
	}
	if k, _ := (Spec{MoistureBasis: PercentOfOptimum}).kind(); basisOf(k.MoistureBasis) != PercentOfOptimum {
		t.Errorf("percent of optimum comes back as %q", basisOf(k.MoistureBasis))
	}
}

// The codes apps test findings against are the ones the arithmetic and the
// projection raise.
func TestCodesMatchTheLedgers(t *testing.T) {
	for got, want := range map[string]string{
		ReasonCompactionBelowMinimum: qc.CompactionBelowMinimum, ReasonMoistureBelowWindow: qc.MoistureBelowWindow,
		ReasonMoistureAboveWindow: qc.MoistureAboveWindow, FlagAboveZeroAirVoids: qc.AboveZeroAirVoids,
		FlagSaturationOver100: qc.SaturationOver100, FlagCompactionSuspectHigh: qc.CompactionSuspectHigh,
		FlagNuclearMoistureUncorrected: qc.NuclearMoistureUncorrected, FlagReferenceNotBracketed: qc.ReferenceNotBracketed,
		FlagOversizeOutsideScope: qc.OversizeOutsideScope, FlagProbeDeeperThanLift: qc.ProbeDeeperThanLift,
		FlagConcurrentRevisions: ledger.ConcurrentRevisions, FlagDeviceResultMismatch: ledger.DeviceResultMismatch,
		FlagDuplicateTestID: ledger.DuplicateTestID, FlagCorrectedByOther: ledger.CorrectedByOther, FlagSelfReview: ledger.SelfReview,
		FlagRetestOfPassingTest: ledger.RetestOfPassingTest, FlagGaugeCalibrationLapsed: ledger.GaugeCalibrationLapsed,
		FlagNoStandardCount: ledger.NoStandardCount, FlagCannotGrade: ledger.CannotGrade,
	} {
		if got != want {
			t.Errorf("code %q, the ledger's %q", got, want)
		}
	}
	for got, want := range map[Verdict]qc.Verdict{Pass: qc.Pass, Fail: qc.Fail, Pending: qc.Pending} {
		if string(got) != string(want) {
			t.Errorf("verdict %q, qc's %q", got, want)
		}
	}
	for got, want := range map[ReviewStatus]ledger.ReviewStatus{Unreviewed: ledger.Unreviewed, Approved: ledger.Approved, Returned: ledger.Returned} {
		if string(got) != string(want) {
			t.Errorf("review status %q, the ledger's %q", got, want)
		}
	}
	for _, s := range []Standard{ASTMD698, ASTMD1557, AASHTOT99, AASHTOT180} {
		if _, err := (soil.Procedure{Standard: soil.Standard(s), Method: "A"}).Scope(); err != nil {
			t.Errorf("standard %q: %v", s, err)
		}
	}
	for q := soil.Density; q <= soil.Ratio; q++ {
		if quantities[q] == "" {
			t.Errorf("quantity %d has no word", q)
		}
	}
	for _, c := range []report.Closure{report.Open, report.Retested, report.Excepted, report.Withdrawn} {
		if string(closures[c]) != string(c) {
			t.Errorf("closure %q is %q here", c, closures[c])
		}
	}
}
