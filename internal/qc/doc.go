// Package qc grades in-place density tests against a laboratory reference
// and an acceptance specification, and estimates the percent of a lot
// within limits.
//
// # Grading
//
// Relative compaction is the field dry density as a percent of the
// reference's maximum dry density; moisture deviation is the field moisture
// minus optimum, in percentage points (or the moisture as a percent of
// optimum, when a spec writes its window that way). When the tested
// material holds oversize particles removed from the laboratory specimen,
// the reference is first corrected to the total material (ASTM D4718 /
// AASHTO T 224).
//
// A [Spec] holds an optional minimum relative compaction and an optional
// moisture window, each written as a [Limit] that keeps the places it was
// written with. Conformance is decided on the value rounded to the last
// place of the limit as written (AASHTO R 11 / ASTM E29): 94.6 % conforms to
// a minimum of "95" (it rounds to 95) and not to "95.0". Rounding is done
// once, from the unrounded computed value.
//
// The verdict is [Pass] or [Fail], with a [Finding] for each failed rule.
// Flags never change the verdict: they mark what a reviewer must look at,
// such as a point above zero air voids, a relative compaction above 105 %,
// a nuclear moisture not corrected for the material, a reference curve that
// does not bracket its peak, oversize outside the method's scope, or a probe
// deeper than the lift.
//
// # Percent within limits
//
// [PercentWithinLimits] computes the mean, the sample standard deviation,
// the quality indexes Q_L = (mean - LSL) / s and Q_U = (USL - mean) / s, and
// the percent within limits by the beta-distribution estimator (gonum's
// regularized incomplete beta function), one- or two-sided.
//
// Results support, and never replace, review by qualified personnel; the
// project's specifications and local codes govern every acceptance limit.
package qc
