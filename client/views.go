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

// FrequencyRuleKind names a spec's test frequency rule.
type FrequencyRuleKind string

// The frequency rules a spec can set (Spec.VolumePerTest, AreaPerTest,
// LengthPerTest and MinTestsPerLift).
const (
	PerVolume FrequencyRuleKind = "volume"   // one test per so many m3 of compacted fill
	PerArea   FrequencyRuleKind = "area"     // one test per so many m2 of the lift's plan area
	PerLength FrequencyRuleKind = "length"   // one test per so many m along the alignment
	PerLift   FrequencyRuleKind = "per_lift" // at least so many tests on every lift
)

// FrequencyRule is one of a spec's frequency rules applied to one lift.
type FrequencyRule struct {
	Kind FrequencyRuleKind `json:"kind"`
	// Per is the spec's quantity per test: m3, m2 or m; for PerLift, the
	// number of tests each lift needs.
	Per float64 `json:"per"`
	// Quantity is the lift's compacted volume (m3), plan area (m2, recorded
	// or from its stations and offsets) or length along the alignment (m);
	// 1, the lift, for PerLift; zero when the placement does not record it.
	Quantity float64 `json:"quantity"`
	// Required is Quantity / Per rounded up, or Per for PerLift; zero when
	// the rule does not apply.
	Required int `json:"required"`
	// Applies is false when the lift's quantity is not recorded; Why then
	// says what is missing.
	Applies bool   `json:"applies"`
	Why     string `json:"why"`
}

// Frequency is the test count of one placement against one spec.
type Frequency struct {
	Placement Placement `json:"placement"`
	SpecID    string    `json:"spec_id"`
	// Rules are the spec's frequency rules in the order volume, area,
	// length, per lift: only those the spec sets, applied or not.
	Rules []FrequencyRule `json:"rules"`
	// Required is the most any applying rule asks. Taken counts the final
	// tests of the placement against the spec: a failure replaced by a
	// passing retest counts once, through the retest; a voided test, one
	// the office returned and one not graded do not count. Shortfall is
	// Required - Taken when positive, else zero.
	Required  int `json:"required"`
	Taken     int `json:"taken"`
	Shortfall int `json:"shortfall"`
	// Deprecated: Tests is Taken, kept for apps that read "tests".
	Tests int `json:"tests"`
}

// LotScope says what makes a lot. The zero scope makes one lot per lift:
// per placement and spec. With Feature set, one lot per spec of the tests
// of that feature within the bounds, each of which is unbounded when zero:
// lifts LiftFrom to LiftTo and days DayFrom to DayTo (YYYY-MM-DD in the
// project's time zone), inclusive. A test belongs to a feature and a lift
// by its placement's, or by its own feature and lift when it names no
// placement this device holds; with a lift bound set, a test of no lift is
// out.
type LotScope struct {
	Feature  string `json:"feature"`
	LiftFrom uint32 `json:"lift_from"`
	LiftTo   uint32 `json:"lift_to"`
	DayFrom  string `json:"day_from"`
	DayTo    string `json:"day_to"`
}

// LotAcceptance is a lot's outcome against its spec's LotAcceptancePWL.
type LotAcceptance string

// The outcomes of a lot.
const (
	// LotAccepted: every characteristic's PWL reaches the spec's limit.
	LotAccepted LotAcceptance = "accepted"
	// LotRejected: a characteristic's PWL falls below it; Lot.Why says
	// which.
	LotRejected LotAcceptance = "rejected"
	// LotNoAcceptanceLimit: the spec sets no LotAcceptancePWL; the
	// estimate, if any, is for information.
	LotNoAcceptanceLimit LotAcceptance = "no_acceptance_limit"
	// LotNotEstimated: the spec sets a limit but the lot has no estimate
	// (too few final results, nothing to estimate, or its spec has not
	// reached this device); Lot.Why says why.
	LotNotEstimated LotAcceptance = "not_estimated"
)

// Lot is the statistical acceptance, by percent within limits (AASHTO R 9,
// beta-distribution estimator), of the final tests of one lot against one
// spec: relative compaction against the spec's minimum and, when the spec
// sets a moisture window, moisture against it.
type Lot struct {
	// Name says the lot in words: "embankment lift 3", "embankment lifts
	// 2–5, 2026-07-01 to 2026-07-07".
	Name    string `json:"name"`
	Feature string `json:"feature"`
	// Placement is the lift of a one-lift lot; zero (empty ID) for a lot
	// of a feature scope.
	Placement Placement `json:"placement"`
	SpecID    string    `json:"spec_id"`
	// TestIDs are the lot's final tests, oldest first.
	TestIDs []string `json:"test_ids"`

	// Relative compaction. Values are the final tests' relative compaction,
	// percent, in the order of TestIDs; empty when the spec sets no
	// minimum, which LowerLimit is. N, Mean, StdDev (n - 1), QualityIndex
	// ((Mean - LowerLimit) / StdDev) and PWL are the estimate; N is zero
	// when there is none (Why says why).
	Values       []float64 `json:"values"`
	LowerLimit   float64   `json:"lower_limit"`
	N            int       `json:"n"`
	Mean         float64   `json:"mean"`
	StdDev       float64   `json:"std_dev"`
	QualityIndex float64   `json:"quality_index"`
	PWL          float64   `json:"pwl"`

	// Moisture is against the spec's moisture window; nil when the spec
	// sets none.
	Moisture *MoistureQuality `json:"moisture,omitempty"`

	// Acceptance is the outcome against AcceptancePWL, the spec's
	// LotAcceptancePWL (zero for none).
	Acceptance    LotAcceptance `json:"acceptance"`
	AcceptancePWL float64       `json:"acceptance_pwl"`
	// Why says why the lot has no estimate, or why it was rejected.
	Why string `json:"why"`
	// LeftOut are the lot's tests that are not final, oldest first: a lot
	// holds final tests only.
	LeftOut []LeftOutTest `json:"left_out"`
}

// MoistureQuality is a lot's moisture against its spec's window.
type MoistureQuality struct {
	// Basis is the spec's: Values are w - w_opt in percentage points
	// (PointsOfOptimum) or w / w_opt x 100 (PercentOfOptimum), in the order
	// of Lot.TestIDs.
	Basis  MoistureBasis `json:"basis"`
	Values []float64     `json:"values"`
	// Lower and Upper are the window's limits; nil for an open side.
	Lower *float64 `json:"lower"`
	Upper *float64 `json:"upper"`
	// N, Mean, StdDev (n - 1) and PWL, within both limits, are the
	// estimate; N is zero when there is none (Lot.Why says why).
	N      int     `json:"n"`
	Mean   float64 `json:"mean"`
	StdDev float64 `json:"std_dev"`
	PWL    float64 `json:"pwl"`
}

// Why a test is not final: why a lot, the frequency count and the
// reconciliation leave it out.
const (
	// LeftOutReworked: the test failed and a retest that counts (graded,
	// neither voided nor returned) replaced it.
	LeftOutReworked = "reworked_and_retested"
	// LeftOutReturned: the office returned the test's current revision.
	LeftOutReturned = "returned_by_office"
	// LeftOutVoided: the test was voided.
	LeftOutVoided = "voided"
	// LeftOutNotGraded: the test's verdict is pending (a record it names
	// has not reached this device, or its readings could not be graded).
	LeftOutNotGraded = "not_graded"
)

// LeftOutTest is a test left out of its lot, and why.
type LeftOutTest struct {
	TestID     string `json:"test_id"`
	Reason     string `json:"reason"`                // a LeftOut constant
	ReasonText string `json:"reason_text"`           // the reason in words
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
