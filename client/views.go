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
	Code    string `json:"code"`
	Message string `json:"message"`
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
	Name     string   `json:"name"` // e.g. "sand in hole = used - cone"
	Value    float64  `json:"value"`
	Quantity Quantity `json:"quantity"`
}

// Limits are the acceptance limits a test was graded against, as its spec
// writes them. They are empty while the spec has not reached the device.
type Limits struct {
	SpecID        string        `json:"spec_id"`
	SpecName      string        `json:"spec_name"`
	MinCompaction string        `json:"min_compaction"` // percent; empty for none
	MoistureBasis MoistureBasis `json:"moisture_basis"`
	MoistureLow   string        `json:"moisture_low"`  // empty for none
	MoistureHigh  string        `json:"moisture_high"` // empty for none
}

// Result is a graded test: the densities and moisture, the reference's
// values after any oversize correction, relative compaction and moisture
// deviation, the verdict with its reasons, the flags of the arithmetic, and
// the limits applied.
type Result struct {
	Method          Method  `json:"method"`
	WetDensity      float64 `json:"wet_density"`      // kg/m3
	DryDensity      float64 `json:"dry_density"`      // kg/m3
	Moisture        float64 `json:"moisture"`         // percent
	MaxDryDensity   float64 `json:"max_dry_density"`  // kg/m3
	OptimumMoisture float64 `json:"optimum_moisture"` // percent
	// RelativeCompaction is dry density / maximum dry density x 100.
	RelativeCompaction float64 `json:"relative_compaction"`
	// MoistureDeviation is w - w_opt in points; MoisturePercentOfOptimum
	// w / w_opt x 100.
	MoistureDeviation        float64 `json:"moisture_deviation"`
	MoisturePercentOfOptimum float64 `json:"moisture_percent_of_optimum"`
	// ZeroAirVoids (kg/m3) and Saturation (percent) are zero when the
	// reference gives no specific gravity.
	ZeroAirVoids float64   `json:"zero_air_voids_density"`
	Saturation   float64   `json:"saturation"`
	Verdict      Verdict   `json:"verdict"`
	Reasons      []Finding `json:"reasons"`
	Flags        []Finding `json:"flags"`
	Limits       Limits    `json:"limits"`
}

// TestResult is what the inspector sees the moment a test is recorded.
type TestResult struct {
	TestID  string `json:"test_id"`
	EventID string `json:"event_id"` // the revision just recorded
	// Result holds dry density, relative compaction, moisture deviation, the
	// verdict (pending while the reference or spec has not reached the
	// device), the reasons and the flags of the arithmetic.
	Result Result `json:"result"`
	// Flags are the review flags of the record: equipment, retests,
	// conflicts.
	Flags []Finding `json:"flags"`
	// Missing names records the test refers to that the device lacks.
	Missing []string `json:"missing"`
	// Steps show the arithmetic, for the inspector and the reviewer.
	Steps []Step `json:"steps"`
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
	ID       string    `json:"id"`
	Project  string    `json:"project"`
	Author   string    `json:"author"` // the user who recorded it
	Device   string    `json:"device"`
	Taken    time.Time `json:"taken"`     // the recording device's clock
	Day      string    `json:"day"`       // YYYY-MM-DD of Taken in the project's time zone
	RetestOf string    `json:"retest_of"` // the failing test this retests
	Retests  []string  `json:"retests"`   // the tests that retest this one
	// Current is the event id of the current revision, Content its
	// content (with Project set) and Result its grade, recomputed from the
	// readings against the reference and spec the revision names.
	Current string    `json:"current"`
	Content TestInput `json:"content"`
	Result  Result    `json:"result"`
	// Revisions are every revision, the original first; Unattached the
	// event ids of corrections whose base this device does not hold.
	Revisions    []Revision   `json:"revisions"`
	Unattached   []string     `json:"unattached"`
	Voided       bool         `json:"voided"`
	Voids        []Void       `json:"voids"`
	Reviews      []Review     `json:"reviews"`
	ReviewStatus ReviewStatus `json:"review_status"`
	// Exceptions are QA's acceptances; ExceptionAccepted says one accepts
	// the current revision, which closes its failure without a retest.
	Exceptions        []Exception `json:"exceptions"`
	ExceptionAccepted bool        `json:"exception_accepted"`
	// Flags are for review: conflicts, disagreements, equipment. The
	// arithmetic's own flags are in Result.Flags.
	Flags []Finding `json:"flags"`
	// Missing names the records the current revision refers to that this
	// device does not hold; while any is missing the verdict is pending.
	Missing []string `json:"missing"`
}

// Revision is one revision of a test: the original or a correction.
type Revision struct {
	EventID    string    `json:"event_id"`
	Supersedes string    `json:"supersedes"` // the revision it corrects; empty for the original
	Reason     string    `json:"reason"`
	Author     string    `json:"author"`
	Time       time.Time `json:"time"` // its hybrid clock time
	Content    TestInput `json:"content"`
}

// Void is one voiding of a test.
type Void struct {
	EventID string `json:"event_id"`
	Author  string `json:"author"`
	Reason  string `json:"reason"`
}

// Review is one office review of a revision.
type Review struct {
	EventID  string    `json:"event_id"`
	Author   string    `json:"author"`
	Time     time.Time `json:"time"` // its hybrid clock time
	Revision string    `json:"revision"`
	Decision Decision  `json:"decision"`
	Comment  string    `json:"comment"`
}

// Exception is a QA acceptance of a failing revision as it stands.
type Exception struct {
	EventID  string `json:"event_id"`
	Author   string `json:"author"`
	Revision string `json:"revision"`
	Reason   string `json:"reason"`
}

// Checkpoint is a point of a project's hash-chained ledger: after Seq
// entries of epoch Epoch the chain's hash is Hash (SHA-256, hex).
type Checkpoint struct {
	Project string `json:"project"`
	Epoch   uint64 `json:"epoch"`
	Seq     uint64 `json:"seq"`
	Hash    string `json:"hash"`
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
	Failed  Test    `json:"failed"`
	Retests []Test  `json:"retests"` // in the order taken, retests of retests included
	Closure Closure `json:"closure"`
	// StationShift is the largest distance along the alignment between the
	// failing test and a retest, m: a retest far from the failure did not
	// test the reworked area.
	StationShift float64 `json:"station_shift"`
}

// Frequency is the test count of one placement against its spec.
type Frequency struct {
	Placement Placement `json:"placement"`
	SpecID    string    `json:"spec_id"`
	Tests     int       `json:"tests"`     // graded, not voided, not retests
	Required  int       `json:"required"`  // ceil(compacted volume / volume per test)
	Shortfall int       `json:"shortfall"` // Required - Tests when positive
}

// Lot is the statistical acceptance of the graded original tests of one
// placement against one spec's minimum relative compaction, by percent
// within limits.
type Lot struct {
	Placement Placement `json:"placement"`
	SpecID    string    `json:"spec_id"`
	Values    []float64 `json:"values"` // relative compaction of each test, percent
	N         int       `json:"n"`
	Mean      float64   `json:"mean"`
	StdDev    float64   `json:"std_dev"` // sample standard deviation (n - 1)
	// LowerLimit is the spec's minimum relative compaction; QualityIndex is
	// (Mean - LowerLimit) / StdDev, and PWL the estimated percent of the
	// lot at or above the limit.
	LowerLimit   float64 `json:"lower_limit"`
	QualityIndex float64 `json:"quality_index"`
	PWL          float64 `json:"pwl"`
	// LeftOut are the placement's tests against the spec that are not
	// final, oldest first: a lot holds final tests only.
	LeftOut []LeftOutTest `json:"left_out"`
}

// Why a test is left out of its lot.
const (
	// LeftOutReworked: the test failed and a retest that counts (graded,
	// neither voided nor returned) replaced it.
	LeftOutReworked = "reworked_and_retested"
	// LeftOutReturned: the office returned the test's current revision.
	LeftOutReturned = "returned_by_office"
	// LeftOutVoided: the test was voided.
	LeftOutVoided = "voided"
)

// LeftOutTest is a test left out of its lot, and why.
type LeftOutTest struct {
	TestID     string `json:"test_id"`
	Reason     string `json:"reason"`                // LeftOutReworked, LeftOutReturned or LeftOutVoided
	ReplacedBy string `json:"replaced_by,omitempty"` // for LeftOutReworked, the retest that counts in its place
}

// The scopes of a VolumeBalance.
const (
	BorrowSourceScope = "borrow_source"
	FeatureScope      = "feature"
)

// VolumeBalance reconciles one borrow source or one feature: the compacted
// volume placed, the bank volume that took from borrow (through dry mass,
// from final tests only) and the loose volume hauled; for a feature the
// set-up designs (and a source it is planned from), the bank volume still
// needed for the rest, with its range.
type VolumeBalance struct {
	Scope string `json:"scope"` // BorrowSourceScope or FeatureScope
	// Name is the borrow source's name or the feature's.
	Name string `json:"name"`
	// BorrowSourceID and BorrowSource name the source: for a feature, the
	// one its remaining volume is planned from (or its only source); empty
	// when there is none.
	BorrowSourceID  string  `json:"borrow_source_id"`
	BorrowSource    string  `json:"borrow_source"`
	BankDryDensity  float64 `json:"bank_dry_density"`  // kg/m3, mean of the source's bank tests
	BankStdDev      float64 `json:"bank_std_dev"`      // kg/m3, of the bank tests
	BankHalfWidth   float64 `json:"bank_half_width"`   // kg/m3, of the 95 % confidence interval on the mean
	BankTests       int     `json:"bank_tests"`        // bank tests the bank density comes from
	LooseDryDensity float64 `json:"loose_dry_density"` // kg/m3; zero if not measured
	CompactedVolume float64 `json:"compacted_volume"`  // m3 placed
	// FillDryDensity is the volume-weighted mean dry density of the final
	// tests on the placements (each placement's mean weighted by its
	// compacted volume).
	FillDryDensity float64 `json:"fill_dry_density"` // kg/m3
	FillStdDev     float64 `json:"fill_std_dev"`     // kg/m3, of the final tests
	FillHalfWidth  float64 `json:"fill_half_width"`  // kg/m3, of the 95 % confidence interval on the mean
	Tests          int     `json:"tests"`            // final tests the fill density comes from
	DryMass        float64 `json:"dry_mass"`         // kg
	BankVolume     float64 `json:"bank_volume"`      // m3 of borrow consumed
	LooseHauled    float64 `json:"loose_hauled"`     // m3 loose, from the haul records (for a feature, those naming its placements)
	LooseExpected  float64 `json:"loose_expected"`   // m3 loose the dry mass implies; zero without a loose density
	// HauledSwellPercent is (loose hauled - bank volume) / bank volume;
	// zero without hauls.
	HauledSwellPercent float64 `json:"hauled_swell_percent"`
	// DesignShrinkagePercent is the shrinkage the design assumed, under
	// the project's basis; zero when none is set.
	DesignShrinkagePercent float64 `json:"design_shrinkage_percent"`
	DesignVolume           float64 `json:"design_volume"` // m3 compacted; zero without a design
	RemainingVolume        float64 `json:"remaining_volume"`
	// StillNeeded is the bank volume still needed for the remaining
	// volume, m3, with the ends of its range (RangeMethod says how).
	StillNeeded     float64  `json:"still_needed"`
	StillNeededLow  float64  `json:"still_needed_low"`
	StillNeededHigh float64  `json:"still_needed_high"` // +Inf when the bank interval reaches zero
	RangeMethod     string   `json:"range_method"`
	Notes           []string `json:"notes"` // what could not be computed, and why
	// ShrinkagePercent and ShrinkFactor (compacted / bank) follow the
	// project's ShrinkageBasis, written out in ShrinkDefinition; swell is
	// zero without a loose density.
	ShrinkagePercent float64 `json:"shrinkage_percent"`
	ShrinkFactor     float64 `json:"shrink_factor"`
	SwellPercent     float64 `json:"swell_percent"`
	SwellFactor      float64 `json:"swell_factor"`
	ShrinkDefinition string  `json:"shrink_definition"`
	SwellDefinition  string  `json:"swell_definition"`
}

// AuditFinding is one thing the retest audit asks the QA manager to look
// at.
type AuditFinding struct {
	// Code is machine-readable, e.g. "failure_not_retested"; Title says it
	// in the trade's words.
	Code  string `json:"code"`
	Title string `json:"title"`
	// TestID is the test it concerns; empty for an entry not about a test.
	TestID  string `json:"test_id"`
	Message string `json:"message"`
	// Entries are the event ids of the ledger entries it rests on.
	Entries []string `json:"entries"`
}
