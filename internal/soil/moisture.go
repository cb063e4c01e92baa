package soil

import (
	"fmt"

	"tamp/internal/valid"
)

// OvenDry is a moisture content by oven drying (ASTM D2216, AASHTO T 265).
type OvenDry struct {
	Tare        float64 // mass of the container, kg
	WetWithTare float64 // container and moist specimen, kg
	DryWithTare float64 // container and oven-dried specimen, kg
}

// OvenResult shows the arithmetic of an oven-dry moisture content.
type OvenResult struct {
	WaterMass float64 // wet - dry, kg
	SoilMass  float64 // dry - tare, kg
	Moisture  float64 // water / dry soil, percent
}

// Compute returns the moisture content w = (M_wet - M_dry) / (M_dry - M_tare).
func (o OvenDry) Compute() (OvenResult, error) {
	if err := valid.First(valid.NonNegative("tare", o.Tare), valid.Positive("wet_with_tare", o.WetWithTare),
		valid.Positive("dry_with_tare", o.DryWithTare)); err != nil {
		return OvenResult{}, fmt.Errorf("soil: oven moisture: %w", err)
	}
	if o.DryWithTare > o.WetWithTare {
		return OvenResult{}, fmt.Errorf("soil: oven moisture: %w",
			valid.Fail("dry_with_tare", o.DryWithTare, "must not exceed wet_with_tare (a dried specimen cannot gain mass)"))
	}
	if o.DryWithTare <= o.Tare {
		return OvenResult{}, fmt.Errorf("soil: oven moisture: %w",
			valid.Fail("dry_with_tare", o.DryWithTare, "must exceed tare (no dry soil)"))
	}
	r := OvenResult{WaterMass: o.WetWithTare - o.DryWithTare, SoilMass: o.DryWithTare - o.Tare}
	r.Moisture = 100 * r.WaterMass / r.SoilMass
	if err := checkMoisture("moisture", r.Moisture); err != nil {
		return OvenResult{}, fmt.Errorf("soil: oven moisture: %w", err)
	}
	return r, nil
}

// NuclearMoisture returns the dry density and moisture content from a
// nuclear gauge's wet density and water mass per unit volume M (both kg/m3),
// as ASTM D6938 sec. 1 relates them: dry = wet - M, w = M / dry.
func NuclearMoisture(wet, m float64) (dry, w float64, err error) {
	if err := valid.First(valid.Positive("wet_density", wet), valid.NonNegative("water_per_volume", m)); err != nil {
		return 0, 0, fmt.Errorf("soil: nuclear moisture: %w", err)
	}
	if m >= wet {
		return 0, 0, fmt.Errorf("soil: nuclear moisture: %w",
			valid.Fail("water_per_volume", m, "must be less than wet_density"))
	}
	dry = wet - m
	w = 100 * m / dry
	if err := checkMoisture("moisture", w); err != nil {
		return 0, 0, fmt.Errorf("soil: nuclear moisture: %w", err)
	}
	return dry, w, nil
}

// CorrectionKind says how a moisture correction applies.
type CorrectionKind int

const (
	// Offset adds a number of percentage points to the gauge's moisture.
	Offset CorrectionKind = iota + 1
	// Factor multiplies the gauge's moisture by a ratio.
	Factor
)

// MoistureCorrection adjusts a nuclear gauge's moisture for one material and
// gauge, established by comparison with oven-dry moisture (ASTM D6938 annex).
type MoistureCorrection struct {
	Kind  CorrectionKind
	Value float64 // points for Offset, a ratio for Factor
}

// Apply returns the corrected moisture for gauge moisture w (percent).
func (c MoistureCorrection) Apply(w float64) (float64, error) {
	var out float64
	switch c.Kind {
	case Offset:
		if err := valid.Range("moisture_offset", c.Value, -MaxMoisture, MaxMoisture, " points"); err != nil {
			return 0, fmt.Errorf("soil: moisture correction: %w", err)
		}
		out = w + c.Value
	case Factor:
		if err := valid.Positive("moisture_ratio", c.Value); err != nil {
			return 0, fmt.Errorf("soil: moisture correction: %w", err)
		}
		out = w * c.Value
	default:
		return 0, fmt.Errorf("soil: moisture correction: %w", valid.Missing("moisture_correction", "kind must be offset or factor"))
	}
	if err := checkMoisture("corrected_moisture", out); err != nil {
		return 0, fmt.Errorf("soil: moisture correction: %w", err)
	}
	return out, nil
}

// MoisturePair is one comparison: the gauge's moisture and the oven-dry
// moisture of the same material, both percent.
type MoisturePair struct {
	Gauge, Oven float64
}

// DeriveCorrection returns the correction of kind k from paired tests: the
// mean of (oven - gauge) for Offset, the mean of (oven / gauge) for Factor.
// How many pairs are needed is the project's rule; at least one is required
// here (common practice is three or more).
func DeriveCorrection(k CorrectionKind, pairs []MoisturePair) (MoistureCorrection, error) {
	if len(pairs) == 0 {
		return MoistureCorrection{}, fmt.Errorf("soil: derive moisture correction: %w", valid.Missing("pairs", "at least one paired oven test is required"))
	}
	var sum float64
	for i, p := range pairs {
		if err := valid.First(checkMoisture(fmt.Sprintf("pairs[%d].gauge", i), p.Gauge), checkMoisture(fmt.Sprintf("pairs[%d].oven", i), p.Oven)); err != nil {
			return MoistureCorrection{}, fmt.Errorf("soil: derive moisture correction: %w", err)
		}
		switch k {
		case Offset:
			sum += p.Oven - p.Gauge
		case Factor:
			if p.Gauge == 0 {
				return MoistureCorrection{}, fmt.Errorf("soil: derive moisture correction: %w",
					valid.Fail(fmt.Sprintf("pairs[%d].gauge", i), p.Gauge, "must be greater than zero for a ratio correction"))
			}
			sum += p.Oven / p.Gauge
		default:
			return MoistureCorrection{}, fmt.Errorf("soil: derive moisture correction: %w", valid.Missing("kind", "must be offset or factor"))
		}
	}
	return MoistureCorrection{Kind: k, Value: sum / float64(len(pairs))}, nil
}
