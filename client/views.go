package client

import "time"

// This file holds the values an app reads: results, tests with their
// history, checkpoints and reports. Values are SI, as in types.go.

// Verdict is the outcome of grading a test.
type Verdict string

// The verdicts.
const (
	Pass Verdict = "pass"
	Fail Verdict = "fail"
	// Pending: the test's reference or spec has not reached the device (or
	// it could not be graded); its densities are computed and it is graded
	// when they arrive.
	Pending Verdict = "pending"
)

// Finding is a reason a test failed, or a flag for a reviewer: a code from
// the lists below and a message in plain words.
type Finding struct {
	Code    string
	Message string
}

// Reason codes: why a test failed.
const (
	ReasonCompactionBelowMinimum = "compaction_below_minimum"
	ReasonMoistureBelowWindow    = "moisture_below_window"
	ReasonMoistureAboveWindow    = "moisture_above_window"
)

// Flag codes: what a reviewer must look at. Flags never change a verdict.
const (
	// The arithmetic's flags (Result.Flags).
	FlagAboveZeroAirVoids          = "above_zero_air_voids"
	FlagSaturationOver100          = "saturation_over_100"
	FlagCompactionSuspectHigh      = "compaction_suspect_high"
	FlagNuclearMoistureUncorrected = "nuclear_moisture_uncorrected"
	FlagReferenceNotBracketed      = "reference_not_bracketed"
	FlagOversizeOutsideScope       = "oversize_outside_scope"
	FlagProbeDeeperThanLift        = "probe_deeper_than_lift"

	// The record's flags (Test.Flags, TestResult.Flags).
	FlagConcurrentRevisions    = "concurrent_revisions"     // two revisions supersede the same one
	FlagDeviceResultMismatch   = "device_result_mismatch"   // the recording device's results disagree with the readings
	FlagDuplicateTestID        = "duplicate_test_id"        // two entries recorded the same test id
	FlagCorrectedByOther       = "corrected_by_other"       // a revision is by someone other than the test's author
	FlagSelfReview             = "self_review"              // a review is by the test's author
	FlagRetestOfPassingTest    = "retest_of_passing_test"   // the test retests one that did not fail
	FlagGaugeCalibrationLapsed = "gauge_calibration_lapsed" // the gauge's calibration had lapsed on the day
	FlagNoStandardCount        = "no_standard_count"        // no accepted standard count of the gauge that day
	FlagCannotGrade            = "cannot_grade"             // the readings could not be graded
)

// Quantity says what kind of value a step is, so an app can show it in its
// units.
type Quantity string

// The quantities.
const (
	DensityQuantity     Quantity = "density"      // kg/m3
	MassQuantity        Quantity = "mass"         // kg
	SmallVolumeQuantity Quantity = "small_volume" // m3, a hole or a mould
	VolumeQuantity      Quantity = "volume"       // m3, earthwork
	LengthQuantity      Quantity = "length"       // m
	DepthQuantity       Quantity = "depth"        // m, a probe depth or lift thickness
	PercentQuantity     Quantity = "percent"      // moisture, compaction
	RatioQuantity       Quantity = "ratio"        // dimensionless
)

// Step is one intermediate value of a test's arithmetic, so that an
// inspector or a reviewer can follow how the result was reached.
type Step struct {
	Name     string // e.g. "sand in hole = used - cone"
	Value    float64
	Quantity Quantity
}

// Limits are the acceptance limits a test was graded against, as its spec
// writes them. They are empty while the spec has not reached the device.
type Limits struct {
	SpecID        string
	SpecName      string
	MinCompaction string // percent; empty for none
	MoistureBasis MoistureBasis
	MoistureLow   string // empty for none
	MoistureHigh  string // empty for none
}

// Result is a graded test: the densities and moisture, the reference's
// values after any oversize correction, relative compaction and moisture
// deviation, the verdict with its reasons, the flags of the arithmetic, and
// the limits applied.
type Result struct {
	Method          Method
	WetDensity      float64 // kg/m3
	DryDensity      float64 // kg/m3
	Moisture        float64 // percent
	MaxDryDensity   float64 // kg/m3
	OptimumMoisture float64 // percent
	// RelativeCompaction is dry density / maximum dry density x 100.
	RelativeCompaction float64
	// MoistureDeviation is w - w_opt in points; MoisturePercentOfOptimum
	// w / w_opt x 100.
	MoistureDeviation        float64
	MoisturePercentOfOptimum float64
	// ZeroAirVoids (kg/m3) and Saturation (percent) are zero when the
	// reference gives no specific gravity.
	ZeroAirVoids float64
	Saturation   float64
	Verdict      Verdict
	Reasons      []Finding
	Flags        []Finding
	Limits       Limits
}

// TestResult is what the inspector sees the moment a test is recorded.
type TestResult struct {
	TestID  string
	EventID string // the revision just recorded
	// Result holds dry density, relative compaction, moisture deviation, the
	// verdict (pending while the reference or spec has not reached the
	// device), the reasons and the flags of the arithmetic.
	Result Result
	// Flags are the review flags of the record: equipment, retests,
	// conflicts.
	Flags []Finding
	// Missing names records the test refers to that the device lacks.
	Missing []string
	// Steps show the arithmetic, for the inspector and the reviewer.
	Steps []Step
}

// ReviewStatus is where a test's current revision stands with the office.
type ReviewStatus string

// The review statuses.
const (
	Unreviewed ReviewStatus = "unreviewed"
	Approved   ReviewStatus = "approved"
	Returned   ReviewStatus = "returned"
)

// Test is an in-place density test with its whole history.
type Test struct {
	ID       string
	Project  string
	Author   string // the user who recorded it
	Device   string
	Taken    time.Time // the recording device's clock
	Day      string    // YYYY-MM-DD of Taken in the project's time zone
	RetestOf string    // the failing test this retests
	Retests  []string  // the tests that retest this one
	// Current is the event id of the current revision, Content its
	// content (with Project set) and Result its grade, recomputed from the
	// readings against the reference and spec the revision names.
	Current string
	Content TestInput
	Result  Result
	// Revisions are every revision, the original first; Unattached the
	// event ids of corrections whose base this device does not hold.
	Revisions    []Revision
	Unattached   []string
	Voided       bool
	Voids        []Void
	Reviews      []Review
	ReviewStatus ReviewStatus
	// Exceptions are QA's acceptances; ExceptionAccepted says one accepts
	// the current revision, which closes its failure without a retest.
	Exceptions        []Exception
	ExceptionAccepted bool
	// Flags are for review: conflicts, disagreements, equipment. The
	// arithmetic's own flags are in Result.Flags.
	Flags []Finding
	// Missing names the records the current revision refers to that this
	// device does not hold; while any is missing the verdict is pending.
	Missing []string
}

// Revision is one revision of a test: the original or a correction.
type Revision struct {
	EventID    string
	Supersedes string // the revision it corrects; empty for the original
	Reason     string
	Author     string
	Time       time.Time // its hybrid clock time
	Content    TestInput
}

// Void is one voiding of a test.
type Void struct {
	EventID string
	Author  string
	Reason  string
}

// Review is one office review of a revision.
type Review struct {
	EventID  string
	Author   string
	Time     time.Time // its hybrid clock time
	Revision string
	Decision Decision
	Comment  string
}

// Exception is a QA acceptance of a failing revision as it stands.
type Exception struct {
	EventID  string
	Author   string
	Revision string
	Reason   string
}

// Checkpoint is a point of a project's hash-chained ledger: after Seq
// entries of epoch Epoch the chain's hash is Hash (SHA-256, hex).
type Checkpoint struct {
	Project string
	Epoch   uint64
	Seq     uint64
	Hash    string
}

// Closure says how a failure was dealt with.
type Closure string

// The closures of a failure.
const (
	ClosureOpen      Closure = "open"      // no passing retest, no exception
	ClosureRetested  Closure = "retested"  // a retest passed
	ClosureException Closure = "exception" // QA accepted it as it stands
	ClosureVoided    Closure = "voided"    // the failing test was voided
)

// RetestChain is a failing test and the retests that followed it.
type RetestChain struct {
	Failed  Test
	Retests []Test // in the order taken, retests of retests included
	Closure Closure
	// StationShift is the largest distance along the alignment between the
	// failing test and a retest, m: a retest far from the failure did not
	// test the reworked area.
	StationShift float64
}

// Frequency is the test count of one placement against its spec.
type Frequency struct {
	Placement Placement
	SpecID    string
	Tests     int // graded, not voided, not retests
	Required  int // ceil(compacted volume / volume per test)
	Shortfall int // Required - Tests when positive
}

// Lot is the statistical acceptance of the graded original tests of one
// placement against one spec's minimum relative compaction, by percent
// within limits.
type Lot struct {
	Placement Placement
	SpecID    string
	Values    []float64 // relative compaction of each test, percent
	N         int
	Mean      float64
	StdDev    float64 // sample standard deviation (n - 1)
	// LowerLimit is the spec's minimum relative compaction; QualityIndex is
	// (Mean - LowerLimit) / StdDev, and PWL the estimated percent of the
	// lot at or above the limit.
	LowerLimit   float64
	QualityIndex float64
	PWL          float64
}

// VolumeBalance reconciles one borrow source: the compacted volume placed
// from it, the bank volume that took from borrow (through dry mass) and
// the loose volume hauled.
type VolumeBalance struct {
	BorrowSourceID  string
	BorrowSource    string  // its name
	BankDryDensity  float64 // kg/m3, mean of its bank tests
	LooseDryDensity float64 // kg/m3; zero if not measured
	CompactedVolume float64 // m3 placed from the source
	FillDryDensity  float64 // kg/m3, mean of the graded original tests on those placements
	Tests           int     // tests the fill density comes from
	DryMass         float64 // kg
	BankVolume      float64 // m3 of borrow consumed
	LooseHauled     float64 // m3 loose, from the haul records
	LooseExpected   float64 // m3 loose the dry mass implies; zero without a loose density
	// ShrinkagePercent and ShrinkFactor (compacted / bank) follow the
	// project's ShrinkageBasis, written out in ShrinkDefinition; swell is
	// zero without a loose density.
	ShrinkagePercent float64
	ShrinkFactor     float64
	SwellPercent     float64
	SwellFactor      float64
	ShrinkDefinition string
	SwellDefinition  string
}
