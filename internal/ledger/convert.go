package ledger

import (
	"fmt"
	"time"
	"unique"

	"tamp/internal/earthwork"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/qc"
	"tamp/internal/soil"
)

// This file is the one place protobuf and domain types meet.

// ToProto converts an event to its protobuf body.
func ToProto(e Event) (*pb.EventBody, error) {
	b := &pb.EventBody{
		EventId: e.ID, ProjectId: e.Project, AuthorId: e.Author, DeviceId: e.Device, DeviceSeq: e.DeviceSeq, PrevDeviceSeq: e.PrevDeviceSeq,
		Hlc: &pb.HybridTime{WallMicros: e.HLC.Wall, Logical: e.HLC.Logical}, DeviceTimeMicros: e.DeviceTime.UnixMicro(),
		ResignedFromDeviceId: e.ResignedFrom,
	}
	switch k := e.Kind.(type) {
	case *ProjectSetUp:
		b.Kind = &pb.EventBody_ProjectSetUp{ProjectSetUp: &pb.ProjectSetUp{
			Name: k.Name, Units: unitsToProto(k.Units), WaterDensity: k.WaterDensity,
			ShrinkageConvention: shrinkToProto(k.Shrinkage), ClockSkewLimitSeconds: int64(k.ClockSkewLimit / time.Second), TimeZone: k.TimeZone,
			RetestWithinSeconds: int64(k.RetestWithin / time.Second), RetestDistance: k.RetestDistance,
		}}
		for _, f := range k.Features {
			b.GetProjectSetUp().Features = append(b.GetProjectSetUp().Features, &pb.FeatureDesign{Feature: f.Feature, DesignVolume: f.DesignVolume,
				BorrowSourceId: f.BorrowSourceID, DesignShrinkagePercent: f.DesignShrinkagePercent})
		}
	case *SpecDefined:
		b.Kind = &pb.EventBody_SpecDefined{SpecDefined: &pb.SpecDefined{
			SpecId: k.ID, Name: k.Name, MinCompaction: k.MinCompaction, MoistureBasis: basisToProto(k.MoistureBasis),
			MoistureLow: k.MoistureLow, MoistureHigh: k.MoistureHigh, SuspectCompaction: k.SuspectCompaction, VolumePerTest: k.VolumePerTest,
			AreaPerTest: k.AreaPerTest, LengthPerTest: k.LengthPerTest, MinTestsPerLift: k.MinTestsPerLift, LotAcceptancePwl: k.LotAcceptancePWL,
		}}
	case *ReferenceAdded:
		b.Kind = &pb.EventBody_ReferenceAdded{ReferenceAdded: &pb.ReferenceAdded{
			ReferenceId: k.ID, Material: k.Material, LabSampleId: k.LabSampleID, Standard: standardToProto(k.Procedure.Standard),
			Method: k.Procedure.Method, Edition: int32(k.Procedure.Edition), Points: pointsToProto(k.Points),
			MaxDryDensity: k.MaxDryDensity, OptimumMoisture: k.OptimumMoisture, SpecificGravity: k.Gs,
		}}
	case *EquipmentRegistered:
		b.Kind = &pb.EventBody_EquipmentRegistered{EquipmentRegistered: &pb.EquipmentRegistered{
			EquipmentId: k.ID, Kind: pb.EquipmentKind(k.Kind), Model: k.Model, SerialNumber: k.SerialNumber, CalibrationDue: k.CalibrationDue,
		}}
	case *StandardCountRecorded:
		b.Kind = &pb.EventBody_StandardCountRecorded{StandardCountRecorded: &pb.StandardCountRecorded{
			EquipmentId: k.EquipmentID, Date: k.Date, DensityCount: k.DensityCount, MoistureCount: k.MoistureCount, Accepted: k.Accepted,
		}}
	case *MoistureCorrectionSet:
		m := &pb.MoistureCorrectionSet{CorrectionId: k.ID, EquipmentId: k.EquipmentID, ReferenceId: k.ReferenceID,
			Kind: pb.CorrectionKind(k.Correction.Kind), Value: k.Correction.Value}
		for _, p := range k.Pairs {
			m.Pairs = append(m.Pairs, &pb.MoisturePair{Gauge: p.Gauge, Oven: p.Oven})
		}
		b.Kind = &pb.EventBody_MoistureCorrectionSet{MoistureCorrectionSet: m}
	case *BorrowSourceMeasured:
		m := &pb.BorrowSourceMeasured{BorrowSourceId: k.ID, Name: k.Name, LooseDryDensity: k.LooseDryDensity, ReferenceId: k.ReferenceID}
		for _, r := range k.BankTests {
			m.BankTests = append(m.BankTests, readingsToProto(r))
		}
		b.Kind = &pb.EventBody_BorrowSourceMeasured{BorrowSourceMeasured: m}
	case *LiftPlacementRecorded:
		m := &pb.LiftPlacementRecorded{PlacementId: k.ID, Feature: k.Feature, LiftNumber: k.LiftNumber, Area: k.Area,
			Thickness: k.Thickness, CompactedVolume: k.CompactedVolume, BorrowSourceId: k.BorrowSourceID, PlacedOn: k.PlacedOn, SpecId: k.SpecID}
		if s := k.Stations; s != nil {
			m.Stations = &pb.StationRange{From: s.From, To: s.To, OffsetLeft: s.OffsetLeft, OffsetRight: s.OffsetRight}
		}
		b.Kind = &pb.EventBody_LiftPlacementRecorded{LiftPlacementRecorded: m}
	case *HaulRecorded:
		b.Kind = &pb.EventBody_HaulRecorded{HaulRecorded: &pb.HaulRecorded{
			HaulId: k.ID, BorrowSourceId: k.BorrowSourceID, Loads: k.Loads, LooseVolumePerLoad: k.LooseVolumePerLoad,
			PlacementId: k.PlacementID, HauledOn: k.HauledOn,
		}}
	case *TestRecorded:
		b.Kind = &pb.EventBody_TestRecorded{TestRecorded: &pb.TestRecorded{TestId: k.TestID, Content: contentToProto(k.Content), RetestOf: k.RetestOf}}
	case *TestCorrected:
		b.Kind = &pb.EventBody_TestCorrected{TestCorrected: &pb.TestCorrected{
			TestId: k.TestID, Supersedes: k.Supersedes, Reason: k.Reason, Content: contentToProto(k.Content),
		}}
	case *TestVoided:
		b.Kind = &pb.EventBody_TestVoided{TestVoided: &pb.TestVoided{TestId: k.TestID, Reason: k.Reason}}
	case *TestReviewed:
		b.Kind = &pb.EventBody_TestReviewed{TestReviewed: &pb.TestReviewed{
			TestId: k.TestID, Revision: k.Revision, Decision: pb.ReviewDecision(k.Decision), Comment: k.Comment,
		}}
	case *ExceptionAccepted:
		b.Kind = &pb.EventBody_ExceptionAccepted{ExceptionAccepted: &pb.ExceptionAccepted{TestId: k.TestID, Revision: k.Revision, Reason: k.Reason}}
	case *DeviceEnrolled:
		b.Kind = &pb.EventBody_DeviceEnrolled{DeviceEnrolled: &pb.DeviceEnrolled{DeviceId: k.DeviceID, UserId: k.UserID, PublicKey: k.PublicKey,
			DeviceName: k.Name, UserName: k.UserName, EnrolledMicros: k.Enrolled.UnixMicro(), Role: k.Role}}
	case *DeviceRevoked:
		b.Kind = &pb.EventBody_DeviceRevoked{DeviceRevoked: &pb.DeviceRevoked{DeviceId: k.DeviceID, EffectiveMicros: k.Effective.UnixMicro(),
			RevokedBy: k.RevokedBy, Reason: k.Reason, LastDeviceSeq: k.LastDeviceSeq}}
	default:
		return nil, fmt.Errorf("ledger: encode event %s: %w", e.ID, reject(UnknownKind, "kind", fmt.Sprintf("unknown event kind %T", e.Kind)))
	}
	return b, nil
}

// FromProto converts a protobuf body to an event. It returns a *Rejection
// with UnknownKind when the body holds no kind this version knows.
func FromProto(b *pb.EventBody) (Event, error) {
	e := Event{
		ID: b.GetEventId(), Project: intern(b.GetProjectId()), Author: intern(b.GetAuthorId()), Device: intern(b.GetDeviceId()), DeviceSeq: b.GetDeviceSeq(),
		PrevDeviceSeq: b.GetPrevDeviceSeq(), HLC: HLC{Wall: b.GetHlc().GetWallMicros(), Logical: b.GetHlc().GetLogical()}, DeviceTime: time.UnixMicro(b.GetDeviceTimeMicros()).UTC(),
		ResignedFrom: b.GetResignedFromDeviceId(),
	}
	switch k := b.GetKind().(type) {
	case *pb.EventBody_ProjectSetUp:
		m := k.ProjectSetUp
		e.Kind = &ProjectSetUp{Name: m.GetName(), Units: unitsFromProto(m.GetUnits()), WaterDensity: m.GetWaterDensity(),
			Shrinkage: shrinkFromProto(m.GetShrinkageConvention()), ClockSkewLimit: time.Duration(m.GetClockSkewLimitSeconds()) * time.Second,
			TimeZone: m.GetTimeZone(), RetestWithin: time.Duration(m.GetRetestWithinSeconds()) * time.Second, RetestDistance: m.GetRetestDistance()}
		for _, f := range m.GetFeatures() {
			e.Kind.(*ProjectSetUp).Features = append(e.Kind.(*ProjectSetUp).Features, FeatureDesign{Feature: f.GetFeature(), DesignVolume: f.GetDesignVolume(),
				BorrowSourceID: f.GetBorrowSourceId(), DesignShrinkagePercent: f.GetDesignShrinkagePercent()})
		}
	case *pb.EventBody_SpecDefined:
		m := k.SpecDefined
		e.Kind = &SpecDefined{ID: m.GetSpecId(), Name: m.GetName(), MinCompaction: m.GetMinCompaction(), MoistureBasis: basisFromProto(m.GetMoistureBasis()),
			MoistureLow: m.GetMoistureLow(), MoistureHigh: m.GetMoistureHigh(), SuspectCompaction: m.GetSuspectCompaction(), VolumePerTest: m.GetVolumePerTest(),
			AreaPerTest: m.GetAreaPerTest(), LengthPerTest: m.GetLengthPerTest(), MinTestsPerLift: m.GetMinTestsPerLift(), LotAcceptancePWL: m.GetLotAcceptancePwl()}
	case *pb.EventBody_ReferenceAdded:
		m := k.ReferenceAdded
		e.Kind = &ReferenceAdded{ID: m.GetReferenceId(), Material: m.GetMaterial(), LabSampleID: m.GetLabSampleId(),
			Procedure: soil.Procedure{Standard: standardFromProto(m.GetStandard()), Method: m.GetMethod(), Edition: int(m.GetEdition())},
			Points:    pointsFromProto(m.GetPoints()), MaxDryDensity: m.GetMaxDryDensity(), OptimumMoisture: m.GetOptimumMoisture(), Gs: m.GetSpecificGravity()}
	case *pb.EventBody_EquipmentRegistered:
		m := k.EquipmentRegistered
		e.Kind = &EquipmentRegistered{ID: m.GetEquipmentId(), Kind: EquipmentKind(m.GetKind()), Model: m.GetModel(),
			SerialNumber: m.GetSerialNumber(), CalibrationDue: m.GetCalibrationDue()}
	case *pb.EventBody_StandardCountRecorded:
		m := k.StandardCountRecorded
		e.Kind = &StandardCountRecorded{EquipmentID: m.GetEquipmentId(), Date: m.GetDate(), DensityCount: m.GetDensityCount(),
			MoistureCount: m.GetMoistureCount(), Accepted: m.GetAccepted()}
	case *pb.EventBody_MoistureCorrectionSet:
		m := k.MoistureCorrectionSet
		c := &MoistureCorrectionSet{ID: m.GetCorrectionId(), EquipmentID: m.GetEquipmentId(), ReferenceID: m.GetReferenceId(),
			Correction: soil.MoistureCorrection{Kind: soil.CorrectionKind(m.GetKind()), Value: m.GetValue()}}
		for _, p := range m.GetPairs() {
			c.Pairs = append(c.Pairs, soil.MoisturePair{Gauge: p.GetGauge(), Oven: p.GetOven()})
		}
		e.Kind = c
	case *pb.EventBody_BorrowSourceMeasured:
		m := k.BorrowSourceMeasured
		s := &BorrowSourceMeasured{ID: m.GetBorrowSourceId(), Name: m.GetName(), LooseDryDensity: m.GetLooseDryDensity(), ReferenceID: m.GetReferenceId()}
		for _, r := range m.GetBankTests() {
			s.BankTests = append(s.BankTests, readingsFromProto(r))
		}
		e.Kind = s
	case *pb.EventBody_LiftPlacementRecorded:
		m := k.LiftPlacementRecorded
		p := &LiftPlacementRecorded{ID: m.GetPlacementId(), Feature: m.GetFeature(), LiftNumber: m.GetLiftNumber(), Area: m.GetArea(),
			Thickness: m.GetThickness(), CompactedVolume: m.GetCompactedVolume(), BorrowSourceID: m.GetBorrowSourceId(), PlacedOn: m.GetPlacedOn(), SpecID: m.GetSpecId()}
		if s := m.GetStations(); s != nil {
			p.Stations = &StationRange{From: s.GetFrom(), To: s.GetTo(), OffsetLeft: s.GetOffsetLeft(), OffsetRight: s.GetOffsetRight()}
		}
		e.Kind = p
	case *pb.EventBody_HaulRecorded:
		m := k.HaulRecorded
		e.Kind = &HaulRecorded{ID: m.GetHaulId(), BorrowSourceID: m.GetBorrowSourceId(), Loads: m.GetLoads(),
			LooseVolumePerLoad: m.GetLooseVolumePerLoad(), PlacementID: m.GetPlacementId(), HauledOn: m.GetHauledOn()}
	case *pb.EventBody_TestRecorded:
		m := k.TestRecorded
		e.Kind = &TestRecorded{TestID: m.GetTestId(), Content: contentFromProto(m.GetContent()), RetestOf: m.GetRetestOf()}
	case *pb.EventBody_TestCorrected:
		m := k.TestCorrected
		e.Kind = &TestCorrected{TestID: m.GetTestId(), Supersedes: m.GetSupersedes(), Reason: m.GetReason(), Content: contentFromProto(m.GetContent())}
	case *pb.EventBody_TestVoided:
		m := k.TestVoided
		e.Kind = &TestVoided{TestID: m.GetTestId(), Reason: m.GetReason()}
	case *pb.EventBody_TestReviewed:
		m := k.TestReviewed
		e.Kind = &TestReviewed{TestID: m.GetTestId(), Revision: m.GetRevision(), Decision: Decision(m.GetDecision()), Comment: m.GetComment()}
	case *pb.EventBody_ExceptionAccepted:
		m := k.ExceptionAccepted
		e.Kind = &ExceptionAccepted{TestID: m.GetTestId(), Revision: m.GetRevision(), Reason: m.GetReason()}
	case *pb.EventBody_DeviceEnrolled:
		m := k.DeviceEnrolled
		e.Kind = &DeviceEnrolled{DeviceID: m.GetDeviceId(), UserID: m.GetUserId(), PublicKey: m.GetPublicKey(), Name: m.GetDeviceName(),
			UserName: m.GetUserName(), Enrolled: time.UnixMicro(m.GetEnrolledMicros()).UTC(), Role: m.GetRole()}
	case *pb.EventBody_DeviceRevoked:
		m := k.DeviceRevoked
		e.Kind = &DeviceRevoked{DeviceID: m.GetDeviceId(), Effective: time.UnixMicro(m.GetEffectiveMicros()).UTC(), RevokedBy: m.GetRevokedBy(),
			Reason: m.GetReason(), LastDeviceSeq: m.GetLastDeviceSeq()}
	default:
		return Event{}, reject(UnknownKind, "kind", "the event holds no kind this version of tamp knows")
	}
	return e, nil
}

func unitsToProto(s soil.System) pb.UnitSystem {
	switch s {
	case soil.US:
		return pb.UnitSystem_UNIT_SYSTEM_US
	case soil.SI:
		return pb.UnitSystem_UNIT_SYSTEM_SI
	}
	return pb.UnitSystem_UNIT_SYSTEM_UNSPECIFIED
}

func unitsFromProto(u pb.UnitSystem) soil.System {
	switch u {
	case pb.UnitSystem_UNIT_SYSTEM_US:
		return soil.US
	case pb.UnitSystem_UNIT_SYSTEM_SI:
		return soil.SI
	}
	return 0
}

func shrinkToProto(c earthwork.Convention) pb.ShrinkageConvention {
	if c == earthwork.CompactedBasis {
		return pb.ShrinkageConvention_SHRINKAGE_CONVENTION_COMPACTED
	}
	return pb.ShrinkageConvention_SHRINKAGE_CONVENTION_BANK
}

func shrinkFromProto(c pb.ShrinkageConvention) earthwork.Convention {
	if c == pb.ShrinkageConvention_SHRINKAGE_CONVENTION_COMPACTED {
		return earthwork.CompactedBasis
	}
	return earthwork.BankBasis
}

func basisToProto(b qc.MoistureBasis) pb.MoistureBasis {
	if b == qc.PercentOfOptimum {
		return pb.MoistureBasis_MOISTURE_BASIS_PERCENT_OF_OPTIMUM
	}
	return pb.MoistureBasis_MOISTURE_BASIS_POINTS
}

func basisFromProto(b pb.MoistureBasis) qc.MoistureBasis {
	if b == pb.MoistureBasis_MOISTURE_BASIS_PERCENT_OF_OPTIMUM {
		return qc.PercentOfOptimum
	}
	return qc.PointsOfOptimum
}

var standards = []struct {
	s soil.Standard
	p pb.CompactionStandard
}{
	{soil.ASTMD698, pb.CompactionStandard_COMPACTION_STANDARD_ASTM_D698},
	{soil.ASTMD1557, pb.CompactionStandard_COMPACTION_STANDARD_ASTM_D1557},
	{soil.AASHTOT99, pb.CompactionStandard_COMPACTION_STANDARD_AASHTO_T99},
	{soil.AASHTOT180, pb.CompactionStandard_COMPACTION_STANDARD_AASHTO_T180},
}

func standardToProto(s soil.Standard) pb.CompactionStandard {
	for _, x := range standards {
		if x.s == s {
			return x.p
		}
	}
	return pb.CompactionStandard_COMPACTION_STANDARD_UNSPECIFIED
}

func standardFromProto(p pb.CompactionStandard) soil.Standard {
	for _, x := range standards {
		if x.p == p {
			return x.s
		}
	}
	return ""
}

func pointsToProto(pts []soil.CurvePoint) []*pb.CurvePoint {
	var out []*pb.CurvePoint
	for _, p := range pts {
		out = append(out, &pb.CurvePoint{Moisture: p.Moisture, DryDensity: p.DryDensity})
	}
	return out
}

func pointsFromProto(pts []*pb.CurvePoint) []soil.CurvePoint {
	var out []soil.CurvePoint
	for _, p := range pts {
		out = append(out, soil.CurvePoint{Moisture: p.GetMoisture(), DryDensity: p.GetDryDensity()})
	}
	return out
}

func readingsToProto(r Readings) *pb.Readings {
	out := &pb.Readings{}
	switch {
	case r.Nuclear != nil:
		n := r.Nuclear
		m := &pb.NuclearReadings{Backscatter: n.Backscatter, ProbeDepth: n.ProbeDepth, Agreement: n.Agreement,
			CorrectionId: n.CorrectionID, OvenMoisture: n.OvenMoisture}
		for _, c := range n.Counts {
			m.Counts = append(m.Counts, &pb.NuclearCount{WetDensity: c.WetDensity, WaterPerVolume: c.WaterPerVolume})
		}
		out.Method = &pb.Readings_Nuclear{Nuclear: m}
	case r.SandCone != nil:
		s := r.SandCone
		out.Method = &pb.Readings_SandCone{SandCone: &pb.SandConeReadings{SandDensity: s.SandDensity, InitialMass: s.InitialMass,
			FinalMass: s.FinalMass, SandUsed: s.SandUsed, ConeCorrection: s.ConeCorrection, SoilMass: s.SoilMass, Moisture: s.Moisture}}
	case r.DriveCylinder != nil:
		d := r.DriveCylinder
		out.Method = &pb.Readings_DriveCylinder{DriveCylinder: &pb.DriveCylinderReadings{Diameter: d.Diameter, Length: d.Length,
			SoilMass: d.SoilMass, Moisture: d.Moisture}}
	case r.RubberBalloon != nil:
		b := r.RubberBalloon
		out.Method = &pb.Readings_RubberBalloon{RubberBalloon: &pb.RubberBalloonReadings{InitialReading: b.InitialReading,
			FinalReading: b.FinalReading, SoilMass: b.SoilMass, Moisture: b.Moisture}}
	case r.WetDensity != nil:
		out.Method = &pb.Readings_WetDensity{WetDensity: &pb.WetDensityReadings{WetDensity: r.WetDensity.WetDensity, Moisture: r.WetDensity.Moisture}}
	}
	return out
}

func readingsFromProto(r *pb.Readings) Readings {
	var out Readings
	switch m := r.GetMethod().(type) {
	case *pb.Readings_Nuclear:
		n := m.Nuclear
		nr := &NuclearReadings{Backscatter: n.GetBackscatter(), ProbeDepth: n.GetProbeDepth(), Agreement: n.GetAgreement(),
			CorrectionID: n.GetCorrectionId()}
		if n.OvenMoisture != nil {
			w := n.GetOvenMoisture()
			nr.OvenMoisture = &w
		}
		for _, c := range n.GetCounts() {
			nr.Counts = append(nr.Counts, soil.NuclearReading{WetDensity: c.GetWetDensity(), WaterPerVolume: c.GetWaterPerVolume()})
		}
		out.Nuclear = nr
	case *pb.Readings_SandCone:
		s := m.SandCone
		out.SandCone = &soil.SandCone{SandDensity: s.GetSandDensity(), InitialMass: s.GetInitialMass(), FinalMass: s.GetFinalMass(),
			SandUsed: s.GetSandUsed(), ConeCorrection: s.GetConeCorrection(), SoilMass: s.GetSoilMass(), Moisture: s.GetMoisture()}
	case *pb.Readings_DriveCylinder:
		d := m.DriveCylinder
		out.DriveCylinder = &soil.DriveCylinder{Diameter: d.GetDiameter(), Length: d.GetLength(), SoilMass: d.GetSoilMass(), Moisture: d.GetMoisture()}
	case *pb.Readings_RubberBalloon:
		b := m.RubberBalloon
		out.RubberBalloon = &soil.RubberBalloon{InitialReading: b.GetInitialReading(), FinalReading: b.GetFinalReading(),
			SoilMass: b.GetSoilMass(), Moisture: b.GetMoisture()}
	case *pb.Readings_WetDensity:
		out.WetDensity = &soil.WetDensityTest{WetDensity: m.WetDensity.GetWetDensity(), Moisture: m.WetDensity.GetMoisture()}
	}
	return out
}

var verdicts = []struct {
	v qc.Verdict
	p pb.Verdict
}{{qc.Pass, pb.Verdict_VERDICT_PASS}, {qc.Fail, pb.Verdict_VERDICT_FAIL}, {qc.Pending, pb.Verdict_VERDICT_PENDING}}

// VerdictToProto converts a verdict.
func VerdictToProto(v qc.Verdict) pb.Verdict {
	for _, x := range verdicts {
		if x.v == v {
			return x.p
		}
	}
	return pb.Verdict_VERDICT_UNSPECIFIED
}

// VerdictFromProto converts a verdict.
func VerdictFromProto(p pb.Verdict) qc.Verdict {
	for _, x := range verdicts {
		if x.p == p {
			return x.v
		}
	}
	return ""
}

func findingsToProto(fs []qc.Finding) []*pb.Finding {
	var out []*pb.Finding
	for _, f := range fs {
		out = append(out, &pb.Finding{Code: f.Code, Message: f.Message})
	}
	return out
}

func findingsFromProto(fs []*pb.Finding) []qc.Finding {
	var out []qc.Finding
	for _, f := range fs {
		out = append(out, qc.Finding{Code: f.GetCode(), Message: f.GetMessage()})
	}
	return out
}

// ResultsToProto converts results.
func ResultsToProto(r *Results) *pb.Results {
	if r == nil {
		return nil
	}
	return &pb.Results{WetDensity: r.WetDensity, DryDensity: r.DryDensity, Moisture: r.Moisture, MaxDryDensity: r.MaxDryDensity,
		OptimumMoisture: r.OptimumMoisture, RelativeCompaction: r.RelativeCompaction, MoistureDeviation: r.MoistureDeviation,
		Verdict: VerdictToProto(r.Verdict), Reasons: findingsToProto(r.Reasons), Flags: findingsToProto(r.Flags)}
}

func resultsFromProto(r *pb.Results) *Results {
	if r == nil {
		return nil
	}
	return &Results{WetDensity: r.GetWetDensity(), DryDensity: r.GetDryDensity(), Moisture: r.GetMoisture(), MaxDryDensity: r.GetMaxDryDensity(),
		OptimumMoisture: r.GetOptimumMoisture(), RelativeCompaction: r.GetRelativeCompaction(), MoistureDeviation: r.GetMoistureDeviation(),
		Verdict: VerdictFromProto(r.GetVerdict()), Reasons: findingsFromProto(r.GetReasons()), Flags: findingsFromProto(r.GetFlags())}
}

// LocationToProto converts a location.
func LocationToProto(l Location) *pb.Location {
	out := &pb.Location{Station: l.Station, Offset: l.Offset, Elevation: l.Elevation, Description: l.Description}
	if p := l.Position; p != nil {
		out.Position = &pb.GeoPosition{Latitude: p.Latitude, Longitude: p.Longitude, Accuracy: p.Accuracy}
	}
	return out
}

func locationFromProto(l *pb.Location) Location {
	out := Location{Station: l.GetStation(), Offset: l.GetOffset(), Elevation: l.GetElevation(), Description: l.GetDescription()}
	if p := l.GetPosition(); p != nil {
		out.Position = &GeoPosition{Latitude: p.GetLatitude(), Longitude: p.GetLongitude(), Accuracy: p.GetAccuracy()}
	}
	return out
}

func contentToProto(c TestContent) *pb.TestContent {
	out := &pb.TestContent{Readings: readingsToProto(c.Readings), Location: LocationToProto(c.Location), PlacementId: c.PlacementID,
		Feature: c.Feature, LiftNumber: c.LiftNumber, LiftThickness: c.LiftThickness, ReferenceId: c.ReferenceID, SpecId: c.SpecID,
		EquipmentId: c.EquipmentID, Remarks: c.Remarks, DeviceResults: ResultsToProto(c.DeviceResults)}
	if o := c.Oversize; o != nil {
		out.Oversize = &pb.Oversize{Percent: o.Percent, BulkSpecificGravity: o.BulkGs, Moisture: o.Moisture}
	}
	return out
}

// intern returns the one copy of s that every decoded event shares. A
// project's events name the same project, authors, devices, specs,
// references, placements and features over and over; a replica holding a
// million tests would otherwise hold a million copies of each.
func intern(s string) string {
	if s == "" {
		return ""
	}
	return unique.Make(s).Value()
}

func contentFromProto(c *pb.TestContent) TestContent {
	out := TestContent{Readings: readingsFromProto(c.GetReadings()), Location: locationFromProto(c.GetLocation()), PlacementID: intern(c.GetPlacementId()),
		Feature: intern(c.GetFeature()), LiftNumber: c.GetLiftNumber(), LiftThickness: c.GetLiftThickness(), ReferenceID: intern(c.GetReferenceId()),
		SpecID: intern(c.GetSpecId()), EquipmentID: intern(c.GetEquipmentId()), Remarks: c.GetRemarks(), DeviceResults: resultsFromProto(c.GetDeviceResults())}
	if o := c.GetOversize(); o != nil {
		out.Oversize = &soil.Oversize{Percent: o.GetPercent(), BulkGs: o.GetBulkSpecificGravity(), Moisture: o.GetMoisture()}
	}
	return out
}

// ResultsOf returns the results a device reports beside its readings.
func ResultsOf(r qc.Result) *Results {
	return &Results{WetDensity: r.WetDensity, DryDensity: r.DryDensity, Moisture: r.Moisture, MaxDryDensity: r.MaxDryDensity,
		OptimumMoisture: r.OptimumMoisture, RelativeCompaction: r.RelativeCompaction, MoistureDeviation: r.MoistureDeviation,
		Verdict: r.Verdict, Reasons: r.Reasons, Flags: r.Flags}
}

// CheckpointToProto converts a chain point.
func CheckpointToProto(c Checkpoint) *pb.Checkpoint {
	return &pb.Checkpoint{ProjectId: c.Project, Epoch: c.Epoch, Sequence: c.Seq, Hash: c.Hash[:]}
}

// CheckpointFromProto converts a chain point.
func CheckpointFromProto(c *pb.Checkpoint) Checkpoint {
	cp := Checkpoint{Project: c.GetProjectId(), Epoch: c.GetEpoch(), Seq: c.GetSequence()}
	copy(cp.Hash[:], c.GetHash())
	return cp
}

var reasons = []struct {
	r Reason
	p pb.RejectReason
}{
	{Malformed, pb.RejectReason_REJECT_REASON_MALFORMED}, {UnknownKind, pb.RejectReason_REJECT_REASON_UNKNOWN_KIND},
	{BadSignature, pb.RejectReason_REJECT_REASON_BAD_SIGNATURE}, {InvalidField, pb.RejectReason_REJECT_REASON_INVALID_FIELD},
	{ImpossibleReadings, pb.RejectReason_REJECT_REASON_IMPOSSIBLE_READINGS}, {WrongProject, pb.RejectReason_REJECT_REASON_WRONG_PROJECT},
	{ConflictingID, pb.RejectReason_REJECT_REASON_CONFLICTING_ID}, {PermissionDenied, pb.RejectReason_REJECT_REASON_PERMISSION_DENIED},
}

// ReasonToProto converts a refusal's reason.
func ReasonToProto(r Reason) pb.RejectReason {
	for _, x := range reasons {
		if x.r == r {
			return x.p
		}
	}
	return pb.RejectReason_REJECT_REASON_UNSPECIFIED
}

// ReasonFromProto converts a refusal's reason.
func ReasonFromProto(p pb.RejectReason) Reason {
	for _, x := range reasons {
		if x.p == p {
			return x.r
		}
	}
	return 0
}
