package ledger

import (
	"time"

	"tamp/internal/earthwork"
	"tamp/internal/qc"
	"tamp/internal/soil"
)

// Event is a decoded ledger event: who made which entry, when, on which
// project. Its Kind is one of the pointer types of this file.
type Event struct {
	ID        string // UUIDv7
	Project   string // project UUID
	Author    string // user id
	Device    string // device id
	DeviceSeq uint64 // the device's own sequence, from 1
	// PrevDeviceSeq is the DeviceSeq of the device's previous event in the
	// same project, 0 for its first: a server lacking it asks for it.
	PrevDeviceSeq uint64
	HLC           HLC
	DeviceTime    time.Time // the device's wall clock, UTC, microsecond precision
	// ResignedFrom is the device that first signed the entry, when its user
	// re-enrolled with a new key before the entry reached the server.
	ResignedFrom string
	Kind         Kind
}

// Kind is the payload of an event: *ProjectSetUp, *SpecDefined,
// *ReferenceAdded, *EquipmentRegistered, *StandardCountRecorded,
// *MoistureCorrectionSet, *BorrowSourceMeasured, *LiftPlacementRecorded,
// *HaulRecorded, *TestRecorded, *TestCorrected, *TestVoided, *TestReviewed,
// *ExceptionAccepted, *DeviceEnrolled or *DeviceRevoked. Each has a
// descriptor in kinds.go (see Kinds and DescriptorOf).
type Kind interface {
	// KindName is the kind's name in snake case, as reports show it.
	KindName() string
}

// ProjectSetUp names a project and fixes its conventions.
type ProjectSetUp struct {
	Name           string
	Units          soil.System
	WaterDensity   float64 // kg/m3; zero means 1000
	Shrinkage      earthwork.Convention
	ClockSkewLimit time.Duration // zero means DefaultClockSkewLimit
	TimeZone       string        // IANA name; empty means UTC
	Features       []FeatureDesign
	RetestWithin   time.Duration // zero means DefaultRetestWithin
	RetestDistance float64       // m; zero means DefaultRetestDistance
}

// FeatureDesign is one earthwork feature as designed.
type FeatureDesign struct {
	Feature                string
	DesignVolume           float64 // m3 compacted
	BorrowSourceID         string  // planned source of the rest of it
	DesignShrinkagePercent float64 // under the project's convention; zero for none
}

// SpecDefined defines an acceptance specification; limits are kept as
// written.
type SpecDefined struct {
	ID                string
	Name              string
	MinCompaction     string // e.g. "95"; empty for none
	MoistureBasis     qc.MoistureBasis
	MoistureLow       string // empty for none
	MoistureHigh      string // empty for none
	SuspectCompaction float64
	VolumePerTest     float64 // m3 of compacted fill per test; zero for none
	AreaPerTest       float64 // m2 of lift per test; zero for none
	LengthPerTest     float64 // m of alignment per test; zero for none
	MinTestsPerLift   uint32  // zero for none
	LotAcceptancePWL  float64 // percent within limits a lot must reach; zero for none
}

// ReferenceAdded records a laboratory compaction reference.
type ReferenceAdded struct {
	ID              string
	Material        string
	LabSampleID     string
	Procedure       soil.Procedure
	Points          []soil.CurvePoint
	MaxDryDensity   float64 // kg/m3 as reported; zero to use the fitted peak
	OptimumMoisture float64 // percent as reported; zero to use the fit
	Gs              float64 // specific gravity of solids; zero if unknown
}

// EquipmentKind is a kind of test equipment.
type EquipmentKind int

// The kinds of equipment.
const (
	NuclearGauge EquipmentKind = iota + 1
	SandConeApparatus
	DriveCylinderSet
	RubberBalloonApparatus
	Balance
)

// EquipmentRegistered registers equipment or its recalibration.
type EquipmentRegistered struct {
	ID             string
	Kind           EquipmentKind
	Model          string
	SerialNumber   string
	CalibrationDue string // YYYY-MM-DD
}

// StandardCountRecorded is a gauge's daily standard count.
type StandardCountRecorded struct {
	EquipmentID   string
	Date          string // YYYY-MM-DD, project time
	DensityCount  float64
	MoistureCount float64
	Accepted      bool
}

// MoistureCorrectionSet is a nuclear moisture correction for one material
// and gauge.
type MoistureCorrectionSet struct {
	ID          string
	EquipmentID string
	ReferenceID string
	Correction  soil.MoistureCorrection
	Pairs       []soil.MoisturePair
}

// BorrowSourceMeasured records a borrow source and its bank densities.
type BorrowSourceMeasured struct {
	ID              string
	Name            string
	BankTests       []Readings
	LooseDryDensity float64 // kg/m3; zero if not measured
	ReferenceID     string
}

// StationRange is a lift's extent along the alignment, metres.
type StationRange struct {
	From, To                float64
	OffsetLeft, OffsetRight float64
}

// LiftPlacementRecorded records a lift placed and compacted.
type LiftPlacementRecorded struct {
	ID              string
	Feature         string
	LiftNumber      uint32
	Stations        *StationRange
	Area            float64 // m2
	Thickness       float64 // m
	CompactedVolume float64 // m3
	BorrowSourceID  string
	PlacedOn        string // YYYY-MM-DD
	SpecID          string // the spec it is tested against, for its frequency; empty for none
}

// HaulRecorded records loads hauled from a borrow source.
type HaulRecorded struct {
	ID                 string
	BorrowSourceID     string
	Loads              uint32
	LooseVolumePerLoad float64 // m3
	PlacementID        string
	HauledOn           string // YYYY-MM-DD
}

// NuclearReadings are a nuclear gauge test's raw readings.
type NuclearReadings struct {
	Backscatter  bool
	ProbeDepth   float64 // m; zero if not recorded
	Counts       []soil.NuclearReading
	Agreement    float64 // kg/m3; zero means the default
	CorrectionID string  // a MoistureCorrectionSet, if applied
	OvenMoisture *float64
}

// Readings are one test's raw readings; exactly one field is set.
type Readings struct {
	Nuclear       *NuclearReadings
	SandCone      *soil.SandCone
	DriveCylinder *soil.DriveCylinder
	RubberBalloon *soil.RubberBalloon
	WetDensity    *soil.WetDensityTest
}

// GeoPosition is a WGS84 position with its accuracy in metres.
type GeoPosition struct {
	Latitude, Longitude, Accuracy float64
}

// Location is where a test was taken: station and offset in metres,
// elevation in metres, an optional satellite position and a description.
type Location struct {
	Station, Offset, Elevation float64
	Position                   *GeoPosition
	Description                string
}

// Results are the values computed from a test's readings.
type Results struct {
	WetDensity         float64
	DryDensity         float64
	Moisture           float64
	MaxDryDensity      float64
	OptimumMoisture    float64
	RelativeCompaction float64
	MoistureDeviation  float64
	Verdict            qc.Verdict
	Reasons            []qc.Finding
	Flags              []qc.Finding
}

// TestContent is one revision of a test.
type TestContent struct {
	Readings      Readings
	Location      Location
	PlacementID   string
	Feature       string
	LiftNumber    uint32
	LiftThickness float64 // m
	ReferenceID   string
	SpecID        string
	EquipmentID   string
	Oversize      *soil.Oversize
	Remarks       string
	DeviceResults *Results // as the device computed them
}

// TestRecorded records a test; RetestOf names the failing test it retests.
type TestRecorded struct {
	TestID   string
	Content  TestContent
	RetestOf string
}

// TestCorrected is a new revision of a test, based on the revision
// Supersedes (an event id).
type TestCorrected struct {
	TestID     string
	Supersedes string
	Reason     string
	Content    TestContent
}

// TestVoided withdraws a test.
type TestVoided struct {
	TestID string
	Reason string
}

// Decision is an office review's outcome.
type Decision int

// The review decisions.
const (
	Approve Decision = iota + 1
	Return
)

// TestReviewed is an office review of one revision.
type TestReviewed struct {
	TestID   string
	Revision string // event id of the revision reviewed
	Decision Decision
	Comment  string
}

// ExceptionAccepted is a QA manager's acceptance of a failing test as it
// stands, with the reason.
type ExceptionAccepted struct {
	TestID   string
	Revision string // event id of the revision accepted
	Reason   string
}

func (*ExceptionAccepted) KindName() string     { return "exception_accepted" }
func (*DeviceEnrolled) KindName() string        { return "device_enrolled" }
func (*DeviceRevoked) KindName() string         { return "device_revoked" }
func (*ProjectSetUp) KindName() string          { return "project_set_up" }
func (*SpecDefined) KindName() string           { return "spec_defined" }
func (*ReferenceAdded) KindName() string        { return "reference_added" }
func (*EquipmentRegistered) KindName() string   { return "equipment_registered" }
func (*StandardCountRecorded) KindName() string { return "standard_count_recorded" }
func (*MoistureCorrectionSet) KindName() string { return "moisture_correction_set" }
func (*BorrowSourceMeasured) KindName() string  { return "borrow_source_measured" }
func (*LiftPlacementRecorded) KindName() string { return "lift_placement_recorded" }
func (*HaulRecorded) KindName() string          { return "haul_recorded" }
func (*TestRecorded) KindName() string          { return "test_recorded" }
func (*TestCorrected) KindName() string         { return "test_corrected" }
func (*TestVoided) KindName() string            { return "test_voided" }
func (*TestReviewed) KindName() string          { return "test_reviewed" }

// DeviceEnrolled introduces an enrolled device's key to a project, so that
// any replica can verify its entries and a server restored from an older
// copy learns the key again from the devices holding this entry. Only the
// server makes it, signed with its own key.
type DeviceEnrolled struct {
	DeviceID  string
	UserID    string
	PublicKey []byte // Ed25519
	Name      string
	UserName  string
	Enrolled  time.Time
	Role      string // the user's role on the project then; empty in a certificate
}

// DeviceRevoked revokes a device's key at Effective (the server's clock):
// the device's entries numbered above LastDeviceSeq, the highest the
// project's ledger held then, have no effect and are refused on push,
// wherever they come from. A device sets its own clock, so the number, not
// an entry's time, decides. Only the server makes it.
type DeviceRevoked struct {
	DeviceID      string
	Effective     time.Time
	RevokedBy     string
	Reason        string
	LastDeviceSeq uint64
}
