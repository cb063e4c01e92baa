package qc

import (
	"fmt"

	"tamp/internal/soil"
	"tamp/internal/valid"
)

// MoistureBasis says how a spec's moisture window is written.
type MoistureBasis int

const (
	// PointsOfOptimum bounds the deviation w - w_opt, in percentage points.
	PointsOfOptimum MoistureBasis = iota
	// PercentOfOptimum bounds w / w_opt x 100.
	PercentOfOptimum
)

// DefaultSuspectCompaction is the relative compaction above which a result is
// flagged as suspiciously high unless a spec sets its own: 105 % (common
// practice: a result far above the laboratory maximum usually means the wrong
// reference or a reading error).
const DefaultSuspectCompaction = 105.0

// Spec is an acceptance specification for in-place density tests.
type Spec struct {
	Name string
	// MinCompaction is the minimum relative compaction in percent, as
	// written; nil means none.
	MinCompaction *Limit
	// MoistureBasis and the two optional bounds make the moisture window.
	MoistureBasis MoistureBasis
	MoistureLow   *Limit
	MoistureHigh  *Limit
	// SuspectCompaction flags results above it (percent); zero means
	// DefaultSuspectCompaction.
	SuspectCompaction float64
}

// Reference is the laboratory maximum a test is graded against.
type Reference struct {
	MaxDryDensity   float64 // kg/m3, of the material passing the method's sieve
	OptimumMoisture float64 // percent
	// NotBracketed marks a curve whose points do not show its peak.
	NotBracketed bool
	// Procedure, when known, gives the method's oversize scope.
	Procedure *soil.Procedure
}

// Input is everything a test is graded from.
type Input struct {
	Test      soil.InPlace
	Reference Reference
	Spec      Spec
	// Gs (specific gravity of the soil solids) and Water (kg/m3) allow the
	// zero-air-voids and saturation checks; Gs zero skips them.
	Gs    float64
	Water float64
	// Oversize, when set, corrects the reference to the total material
	// (ASTM D4718 / AASHTO T 224) before the test is compared with it.
	Oversize *soil.Oversize
	// LiftThickness, when set (m), is checked against a direct-transmission
	// probe depth.
	LiftThickness float64
	// Units is the system messages show values in; zero means SI.
	Units soil.System
}

// Verdict is the outcome of grading.
type Verdict string

// The verdicts.
const (
	Pass Verdict = "pass"
	Fail Verdict = "fail"
	// Pending is the verdict of a test whose reference is not known yet
	// (a zero Reference): its densities and flags are computed, and it is
	// graded when the reference arrives.
	Pending Verdict = "pending"
)

// Finding is one reason for a failing verdict, or one flag for a reviewer.
type Finding struct {
	Code    string `json:"code"`
	Message string `json:"message"`
}

// Reason codes: why a test failed.
const (
	CompactionBelowMinimum = "compaction_below_minimum"
	MoistureBelowWindow    = "moisture_below_window"
	MoistureAboveWindow    = "moisture_above_window"
)

// Flag codes: what a reviewer must look at. Flags never change the verdict.
const (
	AboveZeroAirVoids          = "above_zero_air_voids"
	SaturationOver100          = "saturation_over_100"
	CompactionSuspectHigh      = "compaction_suspect_high"
	NuclearMoistureUncorrected = "nuclear_moisture_uncorrected"
	ReferenceNotBracketed      = "reference_not_bracketed"
	OversizeOutsideScope       = "oversize_outside_scope"
	ProbeDeeperThanLift        = "probe_deeper_than_lift"
)

// RoundingNote is shown beside verdicts.
const RoundingNote = "Conformance is decided on each value rounded to the last place of its limit as written " +
	"(AASHTO R 11 / ASTM E29): 94.6 conforms to a minimum of 95 but not to 95.0."

// Caution is shown with every result.
const Caution = "Results support, and never replace, review by qualified personnel; the project's " +
	"specifications and local codes govern every acceptance limit."

// NuclearCaution is shown with nuclear gauge results.
const NuclearCaution = "Nuclear gauges are licensed radioactive sources: their use, transport and storage " +
	"follow the licensee's radiation-safety programme."

// Result is a graded test.
type Result struct {
	WetDensity      float64 // kg/m3
	DryDensity      float64 // kg/m3
	Moisture        float64 // percent
	MaxDryDensity   float64 // kg/m3, after any oversize correction
	OptimumMoisture float64 // percent, after any oversize correction
	// RelativeCompaction is dry / max dry x 100.
	RelativeCompaction float64
	// MoistureDeviation is w - w_opt in points; MoisturePercentOfOptimum is
	// w / w_opt x 100.
	MoistureDeviation        float64
	MoisturePercentOfOptimum float64
	// ZeroAirVoids and Saturation are zero when no Gs was given.
	ZeroAirVoids float64
	Saturation   float64
	Verdict      Verdict
	Reasons      []Finding
	Flags        []Finding
}

// Grade computes relative compaction and moisture deviation and decides the
// verdict against the spec; with a zero Reference the verdict is Pending and
// only the flags that need no reference are raised. It returns a
// *valid.FieldError for an impossible input (a negative maximum dry
// density, a dry density above the solids' density).
func Grade(in Input) (Result, error) {
	t, ref := in.Test, in.Reference
	if err := valid.First(valid.Positive("dry_density", t.DryDensity), valid.Range("moisture", t.Moisture, 0, soil.MaxMoisture, " %"),
		valid.NonNegative("suspect_compaction", in.Spec.SuspectCompaction), valid.NonNegative("lift_thickness", in.LiftThickness)); err != nil {
		return Result{}, fmt.Errorf("qc: grade: %w", err)
	}
	r := Result{WetDensity: t.WetDensity, DryDensity: t.DryDensity, Moisture: t.Moisture, Verdict: Pending}
	if ref != (Reference{}) {
		if err := r.grade(in); err != nil {
			return Result{}, err
		}
	}
	if err := r.plausibility(in); err != nil {
		return Result{}, err
	}
	return r, nil
}

// grade compares the test with its reference and spec.
func (r *Result) grade(in Input) error {
	ref := in.Reference
	if err := valid.First(valid.Positive("max_dry_density", ref.MaxDryDensity), valid.Positive("optimum_moisture", ref.OptimumMoisture)); err != nil {
		return fmt.Errorf("qc: grade: %w", err)
	}
	r.MaxDryDensity, r.OptimumMoisture = ref.MaxDryDensity, ref.OptimumMoisture
	if in.Oversize != nil && in.Oversize.Percent > 0 {
		water := in.Water
		if water == 0 {
			return fmt.Errorf("qc: grade: %w", valid.Missing("water_density", "is required for an oversize correction"))
		}
		mdd, omc, err := soil.CorrectForOversize(ref.MaxDryDensity, ref.OptimumMoisture, *in.Oversize, water)
		if err != nil {
			return fmt.Errorf("qc: grade: %w", err)
		}
		r.MaxDryDensity, r.OptimumMoisture = mdd, omc
		if ref.Procedure != nil {
			ok, err := ref.Procedure.InScope(in.Oversize.Percent)
			if err != nil {
				return fmt.Errorf("qc: grade: %w", err)
			}
			if !ok {
				sc, _ := ref.Procedure.Scope()
				r.flag(OversizeOutsideScope, fmt.Sprintf("oversize %.1f %% is outside the scope of %s (at most %.0f %% retained on the %s sieve, and the correction's limit); the reference may not apply",
					in.Oversize.Percent, ref.Procedure, min(sc.MaxOversize, soil.OversizeCorrectionLimit(sc.Sieve)), sc.Sieve))
			}
		}
	}
	r.RelativeCompaction = 100 * r.DryDensity / r.MaxDryDensity
	r.MoistureDeviation = r.Moisture - r.OptimumMoisture
	r.MoisturePercentOfOptimum = 100 * r.Moisture / r.OptimumMoisture

	if l := in.Spec.MinCompaction; l != nil && !l.AtLeast(r.RelativeCompaction) {
		r.Reasons = append(r.Reasons, Finding{CompactionBelowMinimum, fmt.Sprintf(
			"relative compaction %.2f %% (rounded to %s against the limit as written) is below the minimum of %s %%",
			r.RelativeCompaction, l.Format(l.Round(r.RelativeCompaction)), l)})
	}
	mv, unit := r.MoistureDeviation, "points from optimum"
	if in.Spec.MoistureBasis == PercentOfOptimum {
		mv, unit = r.MoisturePercentOfOptimum, "% of optimum"
	}
	if l := in.Spec.MoistureLow; l != nil && l.Round(mv) < l.Value {
		r.Reasons = append(r.Reasons, Finding{MoistureBelowWindow, fmt.Sprintf(
			"moisture %.1f %% is %s %s, below the window's lower limit of %s %s", r.Moisture, l.Format(l.Round(mv)), unit, l, unit)})
	}
	if l := in.Spec.MoistureHigh; l != nil && l.Round(mv) > l.Value {
		r.Reasons = append(r.Reasons, Finding{MoistureAboveWindow, fmt.Sprintf(
			"moisture %.1f %% is %s %s, above the window's upper limit of %s %s", r.Moisture, l.Format(l.Round(mv)), unit, l, unit)})
	}
	r.Verdict = Pass
	if len(r.Reasons) > 0 {
		r.Verdict = Fail
	}
	if ref.NotBracketed {
		r.flag(ReferenceNotBracketed, "the reference curve's points do not bracket its peak; its maximum dry density and optimum moisture are uncertain")
	}
	suspect := in.Spec.SuspectCompaction
	if suspect == 0 {
		suspect = DefaultSuspectCompaction
	}
	if r.RelativeCompaction > suspect {
		r.flag(CompactionSuspectHigh, fmt.Sprintf("relative compaction %.1f %% is above %.0f %%: check the reference, the material and the reading", r.RelativeCompaction, suspect))
	}
	return nil
}

// plausibility raises the flags that do not need a reference.
func (r *Result) plausibility(in Input) error {
	t := in.Test
	if in.Gs != 0 {
		if in.Water == 0 {
			return fmt.Errorf("qc: grade: %w", valid.Missing("water_density", "is required with gs"))
		}
		ph, err := soil.PhaseRelations(r.DryDensity, r.Moisture, in.Gs, in.Water)
		if err != nil {
			return fmt.Errorf("qc: grade: %w", err)
		}
		r.ZeroAirVoids, r.Saturation = ph.ZeroAirVoids, ph.Saturation
		if r.DryDensity > ph.ZeroAirVoids {
			r.flag(AboveZeroAirVoids, fmt.Sprintf("dry density lies above the zero-air-voids density (%s) for Gs %.2f at this moisture: check the moisture, Gs and reference",
				show(in.Units, soil.Density, ph.ZeroAirVoids), in.Gs))
			r.flag(SaturationOver100, fmt.Sprintf("computed degree of saturation is %.1f %%, which is impossible; the inputs do not agree", ph.Saturation))
		}
	}
	if (t.Method == soil.NuclearDirect || t.Method == soil.NuclearBackscatter) && !t.MoistureCorrected {
		r.flag(NuclearMoistureUncorrected, "nuclear moisture is used as read, without a correction for this material (ASTM D6938); confirm with an oven-dry moisture")
	}
	if in.LiftThickness > 0 && t.ProbeDepth > in.LiftThickness+1e-9 {
		r.flag(ProbeDeeperThanLift, fmt.Sprintf("probe depth %s is deeper than the lift (%s): the reading includes material below the lift",
			show(in.Units, soil.Depth, t.ProbeDepth), show(in.Units, soil.Depth, in.LiftThickness)))
	}
	return nil
}

func (r *Result) flag(code, msg string) { r.Flags = append(r.Flags, Finding{code, msg}) }

// show writes the SI value v of quantity q in system s with its unit.
func show(s soil.System, q soil.Quantity, v float64) string {
	if s == 0 {
		s = soil.SI
	}
	return fmt.Sprintf("%.*f %s", s.Places(q), s.FromSI(q, v), s.Unit(q))
}
