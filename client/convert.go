package client

import (
	"errors"
	"fmt"
	"slices"
	"time"

	"tamp/internal/earthwork"
	"tamp/internal/ledger"
	"tamp/internal/qc"
	"tamp/internal/report"
	"tamp/internal/soil"
)

// convert.go is the one place client's values become the types of the
// ledger, soil, qc and report packages and back. Values are copied, never
// shared, so a value handed to an app never aliases the projection.

// invalid is the error of a value the ledger has no word for, named as the
// ledger's own checks name theirs.
func invalid(field, detail string) error {
	return &EntryError{Reason: ledger.InvalidField.String(), Field: field, Message: detail, err: ErrInvalid}
}

// refused is the error of an entry the ledger refuses: the *EntryError
// its *ledger.Rejection makes, matching ErrInvalid. An error that holds no
// rejection is returned wrapped in ErrInvalid.
func refused(err error) error {
	var r *ledger.Rejection
	if !errors.As(err, &r) {
		return fmt.Errorf("%w: %w", ErrInvalid, err)
	}
	field, rule := r.FieldRule()
	return &EntryError{Reason: r.Reason.String(), Field: field, Rule: rule, Message: r.Detail, err: ErrInvalid}
}

// denied is the error of an entry the user may not make, by the rule the
// server refuses it by; it matches err.
func denied(rule, msg string, err error) error {
	return &EntryError{Reason: ledger.PermissionDenied.String(), Rule: rule, Message: msg, err: err}
}

// reasonRequired is the error of a correction, void or accepted exception
// without a reason; what says what it is.
func reasonRequired(what string) error {
	return &EntryError{Reason: ledger.InvalidField.String(), Field: "reason", Message: what + " needs a reason", err: ErrReasonRequired}
}

// each converts a list. An empty list stays nil, as the ledger decodes
// it: a device's view of an entry must be the one every replica decoding
// its signed bytes holds.
func each[T, U any](in []T, f func(T) U) []U {
	if len(in) == 0 {
		return nil
	}
	out := make([]U, 0, len(in))
	for _, v := range in {
		out = append(out, f(v))
	}
	return out
}

func ptrCopy[T any](p *T) *T {
	if p == nil {
		return nil
	}
	v := *p
	return &v
}

// Readings.

func (r Readings) ledger() ledger.Readings {
	var out ledger.Readings
	if n := r.Nuclear; n != nil {
		counts := each(n.Readings, func(g GaugeReading) soil.NuclearReading {
			return soil.NuclearReading{WetDensity: g.WetDensity, WaterPerVolume: g.WaterPerVolume}
		})
		out.Nuclear = &ledger.NuclearReadings{Backscatter: n.Backscatter, ProbeDepth: n.ProbeDepth, Counts: counts,
			Agreement: n.Agreement, CorrectionID: n.CorrectionID, OvenMoisture: ptrCopy(n.OvenMoisture)}
	}
	if c := r.SandCone; c != nil {
		out.SandCone = &soil.SandCone{SandDensity: c.SandDensity, InitialMass: c.InitialMass, FinalMass: c.FinalMass,
			SandUsed: c.SandUsed, ConeCorrection: c.ConeCorrection, SoilMass: c.SoilMass, Moisture: c.Moisture}
	}
	if d := r.DriveCylinder; d != nil {
		out.DriveCylinder = &soil.DriveCylinder{Diameter: d.Diameter, Length: d.Length, SoilMass: d.SoilMass, Moisture: d.Moisture}
	}
	if b := r.RubberBalloon; b != nil {
		out.RubberBalloon = &soil.RubberBalloon{InitialReading: b.InitialReading, FinalReading: b.FinalReading,
			SoilMass: b.SoilMass, Moisture: b.Moisture}
	}
	if w := r.WetDensity; w != nil {
		out.WetDensity = &soil.WetDensityTest{WetDensity: w.WetDensity, Moisture: w.Moisture}
	}
	return out
}

func readingsOf(r ledger.Readings) Readings {
	var out Readings
	if n := r.Nuclear; n != nil {
		g := each(n.Counts, func(c soil.NuclearReading) GaugeReading {
			return GaugeReading{WetDensity: c.WetDensity, WaterPerVolume: c.WaterPerVolume}
		})
		out.Nuclear = &NuclearGauge{Backscatter: n.Backscatter, ProbeDepth: n.ProbeDepth, Readings: g, Agreement: n.Agreement,
			CorrectionID: n.CorrectionID, OvenMoisture: ptrCopy(n.OvenMoisture)}
	}
	if c := r.SandCone; c != nil {
		out.SandCone = &SandCone{SandDensity: c.SandDensity, InitialMass: c.InitialMass, FinalMass: c.FinalMass,
			SandUsed: c.SandUsed, ConeCorrection: c.ConeCorrection, SoilMass: c.SoilMass, Moisture: c.Moisture}
	}
	if d := r.DriveCylinder; d != nil {
		out.DriveCylinder = &DriveCylinder{Diameter: d.Diameter, Length: d.Length, SoilMass: d.SoilMass, Moisture: d.Moisture}
	}
	if b := r.RubberBalloon; b != nil {
		out.RubberBalloon = &RubberBalloon{InitialReading: b.InitialReading, FinalReading: b.FinalReading,
			SoilMass: b.SoilMass, Moisture: b.Moisture}
	}
	if w := r.WetDensity; w != nil {
		out.WetDensity = &MeasuredDensity{WetDensity: w.WetDensity, Moisture: w.Moisture}
	}
	return out
}

// methodOf is the method of readings r, as Readings.Method names it.
func methodOf(r ledger.Readings) Method {
	switch {
	case r.Nuclear != nil && r.Nuclear.Backscatter:
		return NuclearBackscatter
	case r.Nuclear != nil:
		return NuclearDirect
	case r.SandCone != nil:
		return SandConeMethod
	case r.DriveCylinder != nil:
		return DriveCylinderMethod
	case r.RubberBalloon != nil:
		return RubberBalloonMethod
	case r.WetDensity != nil:
		return MeasuredWetDensity
	}
	return ""
}

func (l Location) ledger() ledger.Location {
	out := ledger.Location{Station: l.Station, Offset: l.Offset, Elevation: l.Elevation, Description: l.Description}
	if p := l.Position; p != nil {
		out.Position = &ledger.GeoPosition{Latitude: p.Latitude, Longitude: p.Longitude, Accuracy: p.Accuracy}
	}
	return out
}

func locationOf(l ledger.Location) Location {
	out := Location{Station: l.Station, Offset: l.Offset, Elevation: l.Elevation, Description: l.Description}
	if p := l.Position; p != nil {
		out.Position = &GeoPosition{Latitude: p.Latitude, Longitude: p.Longitude, Accuracy: p.Accuracy}
	}
	return out
}

func (o *Oversize) ledger() *soil.Oversize {
	if o == nil {
		return nil
	}
	return &soil.Oversize{Percent: o.Percent, BulkGs: o.BulkSpecificGravity, Moisture: o.Moisture}
}

func oversizeOf(o *soil.Oversize) *Oversize {
	if o == nil {
		return nil
	}
	return &Oversize{Percent: o.Percent, BulkSpecificGravity: o.BulkGs, Moisture: o.Moisture}
}

// content is the test content in takes; the device's results are added
// when it is graded.
func (in TestInput) content() ledger.TestContent {
	return ledger.TestContent{Readings: in.Readings.ledger(), Location: in.Location.ledger(), PlacementID: in.PlacementID,
		Feature: in.Feature, LiftNumber: in.LiftNumber, LiftThickness: in.LiftThickness, ReferenceID: in.ReferenceID,
		SpecID: in.SpecID, EquipmentID: in.EquipmentID, Oversize: in.Oversize.ledger(), Remarks: in.Remarks}
}

func inputOf(project string, c ledger.TestContent) TestInput {
	return TestInput{Project: project, Readings: readingsOf(c.Readings), Location: locationOf(c.Location), PlacementID: c.PlacementID,
		Feature: c.Feature, LiftNumber: c.LiftNumber, LiftThickness: c.LiftThickness, ReferenceID: c.ReferenceID,
		SpecID: c.SpecID, EquipmentID: c.EquipmentID, Oversize: oversizeOf(c.Oversize), Remarks: c.Remarks}
}

// Records.

var unitsToLedger = map[Units]soil.System{"": 0, USCustomary: soil.US, SI: soil.SI}

var shrinkageToLedger = map[ShrinkageBasis]earthwork.Convention{"": earthwork.BankBasis, BankBasis: earthwork.BankBasis,
	CompactedBasis: earthwork.CompactedBasis}

func (p ProjectSetUp) kind() (*ledger.ProjectSetUp, error) {
	units, ok := unitsToLedger[p.Units]
	if !ok {
		return nil, invalid("units", fmt.Sprintf("must be %q or %q, not %q", USCustomary, SI, p.Units))
	}
	shrink, ok := shrinkageToLedger[p.Shrinkage]
	if !ok {
		return nil, invalid("shrinkage", fmt.Sprintf("must be %q or %q, not %q", BankBasis, CompactedBasis, p.Shrinkage))
	}
	return &ledger.ProjectSetUp{Name: p.Name, Units: units, WaterDensity: p.WaterDensity, Shrinkage: shrink,
		ClockSkewLimit: p.ClockSkewLimit, TimeZone: p.TimeZone, RetestWithin: p.RetestWithin, RetestDistance: p.RetestDistance,
		Features: each(p.Features, func(f FeatureDesign) ledger.FeatureDesign { return ledger.FeatureDesign(f) })}, nil
}

var basisToLedger = map[MoistureBasis]qc.MoistureBasis{"": qc.PointsOfOptimum, PointsOfOptimum: qc.PointsOfOptimum,
	PercentOfOptimum: qc.PercentOfOptimum}

func (s Spec) kind() (*ledger.SpecDefined, error) {
	basis, ok := basisToLedger[s.MoistureBasis]
	if !ok {
		return nil, invalid("moisture_basis", fmt.Sprintf("must be %q or %q, not %q", PointsOfOptimum, PercentOfOptimum, s.MoistureBasis))
	}
	return &ledger.SpecDefined{ID: s.ID, Name: s.Name, MinCompaction: s.MinCompaction, MoistureBasis: basis,
		MoistureLow: s.MoistureLow, MoistureHigh: s.MoistureHigh, SuspectCompaction: s.SuspectCompaction,
		VolumePerTest: s.VolumePerTest, AreaPerTest: s.AreaPerTest, LengthPerTest: s.LengthPerTest, MinTestsPerLift: s.MinTestsPerLift,
		LotAcceptancePWL: s.LotAcceptancePWL}, nil
}

func basisOf(b qc.MoistureBasis) MoistureBasis {
	if b == qc.PercentOfOptimum {
		return PercentOfOptimum
	}
	return PointsOfOptimum
}

func (r Reference) kind() *ledger.ReferenceAdded {
	pts := each(r.Points, func(p CurvePoint) soil.CurvePoint {
		return soil.CurvePoint{Moisture: p.Moisture, DryDensity: p.DryDensity}
	})
	return &ledger.ReferenceAdded{ID: r.ID, Material: r.Material, LabSampleID: r.LabSampleID,
		Procedure: soil.Procedure{Standard: soil.Standard(r.Standard), Method: r.Method, Edition: r.Edition}, Points: pts,
		MaxDryDensity: r.MaxDryDensity, OptimumMoisture: r.OptimumMoisture, Gs: r.SpecificGravity}
}

var equipmentToLedger = map[EquipmentKind]ledger.EquipmentKind{NuclearGaugeEquipment: ledger.NuclearGauge,
	SandConeApparatus: ledger.SandConeApparatus, DriveCylinderSet: ledger.DriveCylinderSet,
	RubberBalloonApparatus: ledger.RubberBalloonApparatus, Balance: ledger.Balance}

func (e Equipment) kind() (*ledger.EquipmentRegistered, error) {
	k, ok := equipmentToLedger[e.Kind]
	if !ok {
		return nil, invalid("kind", fmt.Sprintf("must be one of %s, not %q", words(equipmentToLedger), e.Kind))
	}
	return &ledger.EquipmentRegistered{ID: e.ID, Kind: k, Model: e.Model, SerialNumber: e.SerialNumber,
		CalibrationDue: e.CalibrationDue}, nil
}

func (c StandardCount) kind() *ledger.StandardCountRecorded {
	return &ledger.StandardCountRecorded{EquipmentID: c.EquipmentID, Date: c.Date, DensityCount: c.DensityCount,
		MoistureCount: c.MoistureCount, Accepted: c.Accepted}
}

var correctionToLedger = map[CorrectionKind]soil.CorrectionKind{OffsetCorrection: soil.Offset, FactorCorrection: soil.Factor}

func (c MoistureCorrection) kind() (*ledger.MoistureCorrectionSet, error) {
	k, ok := correctionToLedger[c.Kind]
	if !ok {
		return nil, invalid("correction.kind", fmt.Sprintf("must be %q or %q, not %q", OffsetCorrection, FactorCorrection, c.Kind))
	}
	pairs := each(c.Pairs, func(p MoisturePair) soil.MoisturePair { return soil.MoisturePair{Gauge: p.Gauge, Oven: p.Oven} })
	return &ledger.MoistureCorrectionSet{ID: c.ID, EquipmentID: c.EquipmentID, ReferenceID: c.ReferenceID,
		Correction: soil.MoistureCorrection{Kind: k, Value: c.Value}, Pairs: pairs}, nil
}

func (b BorrowSource) kind() *ledger.BorrowSourceMeasured {
	tests := each(b.BankTests, Readings.ledger)
	return &ledger.BorrowSourceMeasured{ID: b.ID, Name: b.Name, BankTests: tests, LooseDryDensity: b.LooseDryDensity,
		ReferenceID: b.ReferenceID}
}

func (p Placement) kind() *ledger.LiftPlacementRecorded {
	out := &ledger.LiftPlacementRecorded{ID: p.ID, Feature: p.Feature, LiftNumber: p.LiftNumber, Area: p.Area,
		Thickness: p.Thickness, CompactedVolume: p.CompactedVolume, BorrowSourceID: p.BorrowSourceID, PlacedOn: p.PlacedOn, SpecID: p.SpecID}
	if r := p.Stations; r != nil {
		out.Stations = &ledger.StationRange{From: r.From, To: r.To, OffsetLeft: r.OffsetLeft, OffsetRight: r.OffsetRight}
	}
	return out
}

func placementOf(p *ledger.Placement) Placement {
	out := Placement{ID: p.ID, Feature: p.Feature, LiftNumber: p.LiftNumber, Area: p.Area, Thickness: p.Thickness,
		CompactedVolume: p.CompactedVolume, BorrowSourceID: p.BorrowSourceID, PlacedOn: p.PlacedOn, SpecID: p.SpecID}
	if r := p.Stations; r != nil {
		out.Stations = &StationRange{From: r.From, To: r.To, OffsetLeft: r.OffsetLeft, OffsetRight: r.OffsetRight}
	}
	return out
}

func (h Haul) kind() *ledger.HaulRecorded {
	return &ledger.HaulRecorded{ID: h.ID, BorrowSourceID: h.BorrowSourceID, Loads: h.Loads,
		LooseVolumePerLoad: h.LooseVolumePerLoad, PlacementID: h.PlacementID, HauledOn: h.HauledOn}
}

var decisionToLedger = map[Decision]ledger.Decision{Approve: ledger.Approve, Return: ledger.Return}

func (d Decision) ledger() (ledger.Decision, error) {
	k, ok := decisionToLedger[d]
	if !ok {
		return 0, invalid("decision", fmt.Sprintf("must be %q or %q, not %q", Approve, Return, d))
	}
	return k, nil
}

func decisionOf(d ledger.Decision) Decision {
	for k, v := range decisionToLedger {
		if v == d {
			return k
		}
	}
	return Decision(fmt.Sprintf("unknown(%d)", int(d)))
}

// words lists a map's keys, sorted and quoted, for an error message.
func words[K ~string, V any](m map[K]V) string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, fmt.Sprintf("%q", string(k)))
	}
	slices.Sort(keys)
	return fmt.Sprint(keys)
}

// Results.

func findingsOf(fs []qc.Finding) []Finding {
	return each(fs, func(f qc.Finding) Finding { return Finding{Code: f.Code, Message: f.Message} })
}

var quantities = map[soil.Quantity]Quantity{soil.Density: DensityQuantity, soil.Mass: MassQuantity,
	soil.SmallVolume: SmallVolumeQuantity, soil.Volume: VolumeQuantity, soil.Length: LengthQuantity, soil.Depth: DepthQuantity,
	soil.Percent: PercentQuantity, soil.Ratio: RatioQuantity}

func stepsOf(steps []soil.Step) []Step {
	return each(steps, func(s soil.Step) Step { return Step{Name: s.Name, Value: s.Value, Quantity: quantities[s.Quantity]} })
}

// resultOf is the grade r of content c, with the limits of the spec c
// names when p holds it.
func resultOf(p *ledger.Projection, c ledger.TestContent, r qc.Result) Result {
	out := Result{Method: methodOf(c.Readings), WetDensity: r.WetDensity, DryDensity: r.DryDensity, Moisture: r.Moisture,
		MaxDryDensity: r.MaxDryDensity, OptimumMoisture: r.OptimumMoisture, RelativeCompaction: r.RelativeCompaction,
		MoistureDeviation: r.MoistureDeviation, MoisturePercentOfOptimum: r.MoisturePercentOfOptimum,
		ZeroAirVoids: r.ZeroAirVoids, Saturation: r.Saturation, Verdict: Verdict(r.Verdict),
		Reasons: findingsOf(r.Reasons), Flags: findingsOf(r.Flags)}
	if sp, ok := p.Spec(c.SpecID); ok {
		out.Limits = Limits{SpecID: sp.ID, SpecName: sp.Name, MinCompaction: sp.MinCompaction, MoistureBasis: basisOf(sp.MoistureBasis),
			MoistureLow: sp.MoistureLow, MoistureHigh: sp.MoistureHigh}
	}
	return out
}

func hlcTime(h ledger.HLC) time.Time { return time.UnixMicro(h.Wall).UTC() }

// testOf is a test of p with its history.
func testOf(p *ledger.Projection, t *ledger.Test) Test {
	project := p.Project()
	out := Test{ID: t.ID, Project: project, Author: t.Author, Device: t.Device, Taken: t.DeviceTime, Day: t.Day,
		RetestOf: t.RetestOf, Retests: p.RetestsOf(t.ID), Current: t.Current, Content: inputOf(project, *t.Content),
		Result: resultOf(p, *t.Content, t.Result), Unattached: slices.Clone(t.Unattached), Voided: t.Voided(),
		ReviewStatus: ReviewStatus(t.ReviewStatus), ExceptionAccepted: t.ExceptionAccepted(), Flags: findingsOf(t.Flags),
		Missing: slices.Clone(t.Missing)}
	for _, r := range t.Revisions {
		out.Revisions = append(out.Revisions, Revision{EventID: r.EventID, Supersedes: r.Supersedes, Reason: r.Reason,
			Author: r.Author, Time: hlcTime(r.HLC), Content: inputOf(project, *r.Content)})
	}
	for _, v := range t.Voids {
		out.Voids = append(out.Voids, Void{EventID: v.EventID, Author: v.Author, Reason: v.Reason})
	}
	for _, r := range t.Reviews {
		out.Reviews = append(out.Reviews, Review{EventID: r.EventID, Author: r.Author, Time: hlcTime(r.HLC), Revision: r.Revision,
			Decision: decisionOf(r.Decision), Comment: r.Comment})
	}
	for _, x := range t.Exceptions {
		out.Exceptions = append(out.Exceptions, Exception{EventID: x.EventID, Author: x.Author, Revision: x.Revision, Reason: x.Reason})
	}
	return out
}

func testsOf(p *ledger.Projection, ts []*ledger.Test) []Test {
	out := make([]Test, 0, len(ts))
	for _, t := range ts {
		out = append(out, testOf(p, t))
	}
	return out
}

// Chain points.

func checkpointOf(cp ledger.Checkpoint) Checkpoint {
	return Checkpoint{Project: cp.Project, Epoch: cp.Epoch, Seq: cp.Seq, Hash: cp.Hash.String()}
}

// Reports.

var closures = map[report.Closure]Closure{report.Open: ClosureOpen, report.Retested: ClosureRetested,
	report.Excepted: ClosureException, report.Withdrawn: ClosureVoided}

func chainOf(p *ledger.Projection, c report.Chain) RetestChain {
	return RetestChain{Failed: testOf(p, c.Failed), Retests: testsOf(p, c.Retests), Closure: closures[c.Closure],
		StationShift: c.StationShift}
}

func frequencyOf(f report.Frequency) Frequency {
	out := Frequency{Placement: placementOf(f.Placement), SpecID: f.SpecID, Rules: make([]FrequencyRule, 0, len(f.Rules)),
		Required: f.Required, Taken: f.Taken, Shortfall: f.Shortfall, Tests: f.Taken}
	for _, r := range f.Rules {
		out.Rules = append(out.Rules, FrequencyRule{Kind: FrequencyRuleKind(r.Kind), Per: r.Per, Quantity: r.Quantity, Required: r.Required,
			Applies: r.Applies, Why: r.Why})
	}
	return out
}

// lotOf converts a lot; p gives its spec's moisture basis.
func lotOf(p *ledger.Projection, l report.Lot) Lot {
	out := Lot{Name: l.Name, Feature: l.Feature, SpecID: l.SpecID, TestIDs: make([]string, 0, len(l.Tests)), Values: []float64{},
		Acceptance: LotAcceptance(l.Acceptance), AcceptancePWL: l.AcceptancePWL, Why: l.Why, LeftOut: make([]LeftOutTest, 0, len(l.LeftOut))}
	if l.Placement != nil {
		out.Placement = placementOf(l.Placement)
	}
	for _, t := range l.Tests {
		out.TestIDs = append(out.TestIDs, t.ID)
	}
	if c := l.Compaction; c != nil {
		out.Values = append(out.Values, c.Values...)
		if c.Lower != nil {
			out.LowerLimit = *c.Lower
		}
		if e := c.PWL; e != nil {
			out.N, out.Mean, out.StdDev, out.QualityIndex, out.PWL = e.N, e.Mean, e.StdDev, e.QualityLower, e.PWL
		}
	}
	if m := l.Moisture; m != nil {
		copyOf := func(v *float64) *float64 {
			if v == nil {
				return nil
			}
			c := *v
			return &c
		}
		q := &MoistureQuality{Basis: PointsOfOptimum, Values: append([]float64{}, m.Values...), Lower: copyOf(m.Lower), Upper: copyOf(m.Upper)}
		if sp, ok := p.Spec(l.SpecID); ok {
			q.Basis = basisOf(sp.MoistureBasis)
		}
		if e := m.PWL; e != nil {
			q.N, q.Mean, q.StdDev, q.PWL = e.N, e.Mean, e.StdDev, e.PWL
		}
		out.Moisture = q
	}
	for _, o := range l.LeftOut {
		out.LeftOut = append(out.LeftOut, LeftOutTest{TestID: o.TestID, Reason: string(o.Reason), ReasonText: report.ReasonText[o.Reason],
			ReplacedBy: o.ReplacedBy})
	}
	return out
}

func balanceOf(b report.Balance) VolumeBalance {
	v := VolumeBalance{Scope: string(b.Scope), Name: b.Name, CompactedVolume: b.CompactedVolume,
		FillDryDensity: b.FillDensity.Value, FillStdDev: b.FillDensity.StdDev, FillHalfWidth: b.FillDensity.HalfWidth, Tests: b.FillDensity.N,
		BankDryDensity: b.BankDensity.Value, BankStdDev: b.BankDensity.StdDev, BankHalfWidth: b.BankDensity.HalfWidth, BankTests: b.BankDensity.N,
		DryMass: b.Balance.DryMass, BankVolume: b.BankVolume, LooseHauled: b.LooseHauled,
		LooseExpected: b.LooseExpected, ShrinkagePercent: b.Balance.ShrinkagePercent, ShrinkFactor: b.Balance.ShrinkFactor,
		SwellPercent: b.Balance.SwellPercent, SwellFactor: b.Balance.SwellFactor, ShrinkDefinition: b.Convention.Definition(),
		SwellDefinition: earthwork.SwellDefinition, HauledSwellPercent: b.HauledSwellPercent, DesignShrinkagePercent: b.DesignShrinkagePercent,
		DesignVolume: b.DesignVolume, RemainingVolume: b.Remaining, StillNeeded: b.StillNeeded.Estimate, StillNeededLow: b.StillNeeded.Low,
		StillNeededHigh: b.StillNeeded.High, RangeMethod: report.RangeMethod, Notes: append([]string{}, b.Notes...)}
	if s := b.Source; s != nil {
		v.BorrowSourceID, v.BorrowSource, v.LooseDryDensity = s.ID, s.Name, s.LooseDryDensity
	}
	return v
}

// The project's records, read back (records.go).

func setUpOf(k ledger.ProjectSetUp) ProjectSetUp {
	out := ProjectSetUp{Name: k.Name, WaterDensity: k.WaterDensity, ClockSkewLimit: k.ClockSkewLimit, TimeZone: k.TimeZone,
		RetestWithin: k.RetestWithin, RetestDistance: k.RetestDistance,
		Features: each(k.Features, func(f ledger.FeatureDesign) FeatureDesign { return FeatureDesign(f) })}
	for u, sys := range unitsToLedger {
		if u != "" && sys == k.Units {
			out.Units = u
		}
	}
	out.Shrinkage = BankBasis
	if k.Shrinkage == earthwork.CompactedBasis {
		out.Shrinkage = CompactedBasis
	}
	return out
}

func specOf(k *ledger.SpecDefined) Spec {
	return Spec{ID: k.ID, Name: k.Name, MinCompaction: k.MinCompaction, MoistureBasis: basisOf(k.MoistureBasis),
		MoistureLow: k.MoistureLow, MoistureHigh: k.MoistureHigh, SuspectCompaction: k.SuspectCompaction, VolumePerTest: k.VolumePerTest,
		AreaPerTest: k.AreaPerTest, LengthPerTest: k.LengthPerTest, MinTestsPerLift: k.MinTestsPerLift, LotAcceptancePWL: k.LotAcceptancePWL}
}

func labReferenceOf(r *ledger.Reference) LabReference {
	pts := each(r.Points, func(p soil.CurvePoint) CurvePoint { return CurvePoint{Moisture: p.Moisture, DryDensity: p.DryDensity} })
	ref := Reference{ID: r.ID, Material: r.Material, LabSampleID: r.LabSampleID, Standard: Standard(r.Procedure.Standard),
		Method: r.Procedure.Method, Edition: r.Procedure.Edition, Points: pts, MaxDryDensity: r.MaxDryDensity,
		OptimumMoisture: r.OptimumMoisture, SpecificGravity: r.Gs}
	return LabReference{Reference: ref, GradingMaxDryDensity: r.MaxDry, GradingOptimumMoisture: r.Optimum,
		Fitted: r.MaxDryDensity == 0 && r.Fit != nil, Bracketed: r.Bracketed, Flags: findingsOf(r.Flags), RecordedBy: r.Author}
}

func equipmentOf(e *ledger.Equipment) EquipmentRecord {
	out := EquipmentRecord{Equipment: Equipment{ID: e.ID, Model: e.Model, SerialNumber: e.SerialNumber, CalibrationDue: e.CalibrationDue},
		RecordedBy: e.Author}
	for k, v := range equipmentToLedger {
		if v == e.Kind {
			out.Kind = k
		}
	}
	out.Counts = each(e.Counts, func(c ledger.StandardCountRecorded) StandardCount {
		return StandardCount{EquipmentID: c.EquipmentID, Date: c.Date, DensityCount: c.DensityCount, MoistureCount: c.MoistureCount,
			Accepted: c.Accepted}
	})
	return out
}

func borrowOf(k *ledger.BorrowSourceMeasured) BorrowSource {
	return BorrowSource{ID: k.ID, Name: k.Name, BankTests: each(k.BankTests, readingsOf), LooseDryDensity: k.LooseDryDensity,
		ReferenceID: k.ReferenceID}
}

func haulOf(k *ledger.HaulRecorded) Haul {
	return Haul{ID: k.ID, BorrowSourceID: k.BorrowSourceID, Loads: k.Loads, LooseVolumePerLoad: k.LooseVolumePerLoad,
		PlacementID: k.PlacementID, HauledOn: k.HauledOn}
}
