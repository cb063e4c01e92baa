package client

import "time"

// This file holds the values an app enters: readings, locations and the
// records of each role. All values are SI (kg, m, m2, m3, kg/m3, percent);
// apps convert units at their edges. Words stand for choices (a verdict, a
// standard, a kind of equipment), so that they read the same in a log, a
// JSON document or a debugger. convert.go is the one place they become the
// ledger's types.

// Readings are one test's raw readings: exactly one method is set.
type Readings struct {
	Nuclear       *NuclearGauge    `json:"nuclear,omitempty"`
	SandCone      *SandCone        `json:"sand_cone,omitempty"`
	DriveCylinder *DriveCylinder   `json:"drive_cylinder,omitempty"`
	RubberBalloon *RubberBalloon   `json:"rubber_balloon,omitempty"`
	WetDensity    *MeasuredDensity `json:"wet_density,omitempty"`
}

// Method returns the method the readings are of, or "" when none is set.
func (r Readings) Method() Method { return methodOf(r.ledger()) }

// Method is an in-place density test method.
type Method string

// The in-place methods.
const (
	NuclearDirect       Method = "nuclear_direct"      // ASTM D6938, probe in a punched hole
	NuclearBackscatter  Method = "nuclear_backscatter" // ASTM D6938, gauge on the surface
	SandConeMethod      Method = "sand_cone"           // ASTM D1556, AASHTO T 191
	DriveCylinderMethod Method = "drive_cylinder"      // ASTM D2937
	RubberBalloonMethod Method = "rubber_balloon"      // ASTM D2167
	MeasuredWetDensity  Method = "wet_density"         // a wet density measured by other means
)

// NuclearGauge holds a nuclear moisture-density gauge test (ASTM D6938), in
// direct transmission (the probe lowered into a punched hole) or in
// backscatter (the gauge on the surface). Nuclear gauges hold licensed
// radioactive sources: their use, transport and storage follow the
// licensee's radiation-safety programme.
type NuclearGauge struct {
	Backscatter bool `json:"backscatter"`
	// ProbeDepth is the direct-transmission depth, m (up to 300 mm); zero
	// when not recorded, and always zero in backscatter.
	ProbeDepth float64 `json:"probe_depth"`
	// Readings holds one reading, or two taken with the gauge turned 90
	// degrees between them; two are averaged when their wet densities agree
	// within Agreement.
	Readings  []GaugeReading `json:"readings"`
	Agreement float64        `json:"agreement"` // kg/m3; zero means 32 kg/m3 (2 pcf)
	// CorrectionID names a moisture correction (SetMoistureCorrection)
	// applied to the gauge's moisture.
	CorrectionID string `json:"correction_id"`
	// OvenMoisture, when set, is an oven-dry moisture (percent) of the same
	// material that replaces the gauge's moisture.
	OvenMoisture *float64 `json:"oven_moisture,omitempty"`
}

// GaugeReading is one reading of a nuclear gauge, as the gauge shows it.
type GaugeReading struct {
	WetDensity     float64 `json:"wet_density"`      // kg/m3
	WaterPerVolume float64 `json:"water_per_volume"` // mass of water per unit volume, kg/m3
}

// SandCone holds a sand-cone test (ASTM D1556, AASHTO T 191). Give either
// SandUsed, or the apparatus's masses before and after.
type SandCone struct {
	SandDensity    float64 `json:"sand_density"`    // bulk density of the calibrated sand, kg/m3
	InitialMass    float64 `json:"initial_mass"`    // apparatus with sand before the test, kg
	FinalMass      float64 `json:"final_mass"`      // apparatus with the sand left after, kg
	SandUsed       float64 `json:"sand_used"`       // sand that left the apparatus, kg (instead of the two masses)
	ConeCorrection float64 `json:"cone_correction"` // sand that fills the cone and base plate, kg
	SoilMass       float64 `json:"soil_mass"`       // moist soil dug from the hole, kg
	Moisture       float64 `json:"moisture"`        // percent
}

// DriveCylinder holds a drive-cylinder test (ASTM D2937).
type DriveCylinder struct {
	Diameter float64 `json:"diameter"`  // inside diameter, m
	Length   float64 `json:"length"`    // length of the soil core, m
	SoilMass float64 `json:"soil_mass"` // moist soil in the cylinder, kg
	Moisture float64 `json:"moisture"`  // percent
}

// RubberBalloon holds a rubber-balloon test (ASTM D2167): the apparatus's
// volume readings before and after the hole is dug.
type RubberBalloon struct {
	InitialReading float64 `json:"initial_reading"` // m3
	FinalReading   float64 `json:"final_reading"`   // m3
	SoilMass       float64 `json:"soil_mass"`       // moist soil from the hole, kg
	Moisture       float64 `json:"moisture"`        // percent
}

// MeasuredDensity is a wet density measured by other means and entered as
// it is, with its moisture.
type MeasuredDensity struct {
	WetDensity float64 `json:"wet_density"` // kg/m3
	Moisture   float64 `json:"moisture"`    // percent
}

// Location is where a test was taken: station and offset along the
// alignment (m), elevation (m; a depth below a datum where the project
// records depths), an optional satellite position and a description.
type Location struct {
	Station     float64      `json:"station"`
	Offset      float64      `json:"offset"`
	Elevation   float64      `json:"elevation"`
	Position    *GeoPosition `json:"position,omitempty"`
	Description string       `json:"description"`
}

// GeoPosition is a WGS84 position with its accuracy in metres.
type GeoPosition struct {
	Latitude  float64 `json:"latitude"`
	Longitude float64 `json:"longitude"`
	Accuracy  float64 `json:"accuracy"`
}

// Oversize is the coarse fraction of a tested material, for correcting the
// laboratory maximum to the total material (ASTM D4718, AASHTO T 224).
type Oversize struct {
	Percent             float64 `json:"percent"`               // of the total dry mass, retained on the method's sieve
	BulkSpecificGravity float64 `json:"bulk_specific_gravity"` // of the oversize particles
	Moisture            float64 `json:"moisture"`              // of the oversize, percent
}

// TestInput is what an inspector enters for an in-place density test.
// All values are SI (kg, m, kg/m3, percent).
type TestInput struct {
	Project       string    `json:"project"`
	Readings      Readings  `json:"readings"`
	Location      Location  `json:"location"`
	PlacementID   string    `json:"placement_id"`
	Feature       string    `json:"feature"` // e.g. "embankment", "trench backfill"
	LiftNumber    uint32    `json:"lift_number"`
	LiftThickness float64   `json:"lift_thickness"` // m
	ReferenceID   string    `json:"reference_id"`   // the laboratory reference graded against
	SpecID        string    `json:"spec_id"`        // the specification graded against
	EquipmentID   string    `json:"equipment_id"`   // the gauge or apparatus used
	Oversize      *Oversize `json:"oversize,omitempty"`
	Remarks       string    `json:"remarks"`
}

// RetestInput is what an inspector enters for a retest after rework. Where
// a field is left zero it is taken from the failing test: location, lift,
// reference, spec, equipment and oversize.
type RetestInput struct {
	Readings    Readings  `json:"readings"`
	Location    *Location `json:"location,omitempty"`
	EquipmentID string    `json:"equipment_id"`
	Remarks     string    `json:"remarks"`
}

// Units is the unit system a project shows its values in; values are kept
// in SI whatever it is.
type Units string

// The unit systems.
const (
	USCustomary Units = "us" // lb, ft, ft3, yd3, pcf
	SI          Units = "si" // g, m, cm3, m3, kg/m3 (the default)
)

// ShrinkageBasis is how a project defines shrinkage.
type ShrinkageBasis string

// The shrinkage bases.
const (
	// BankBasis: shrinkage = (bank volume - compacted volume) / bank volume
	// (the default).
	BankBasis ShrinkageBasis = "bank"
	// CompactedBasis: shrinkage = (bank volume - compacted volume) /
	// compacted volume.
	CompactedBasis ShrinkageBasis = "compacted"
)

// ProjectSetUp names a project and fixes its conventions. An
// administrator makes it; a later set-up replaces an earlier one.
type ProjectSetUp struct {
	Name           string         `json:"name"`
	Units          Units          `json:"units"`
	WaterDensity   float64        `json:"water_density"` // kg/m3; zero means 1000
	Shrinkage      ShrinkageBasis `json:"shrinkage"`
	ClockSkewLimit time.Duration  `json:"clock_skew_limit_nanos"` // a device clock further off is flagged; zero means 5 minutes
	TimeZone       string         `json:"time_zone"`              // IANA name, e.g. "America/Denver"; empty means UTC
	// Features are the earthwork features as designed, for the bank
	// volume still needed.
	Features []FeatureDesign `json:"features,omitempty"`
	// RetestWithin is the time within which a failing test must be
	// retested, voided or accepted before the audit reports it; zero means
	// 48 hours.
	RetestWithin time.Duration `json:"retest_within_nanos"`
	// RetestDistance is the distance between a failure and its retest, m,
	// beyond which the audit reports the retest; zero means 10 m.
	RetestDistance float64 `json:"retest_distance"`
}

// FeatureDesign is one earthwork feature as designed.
type FeatureDesign struct {
	Feature                string  `json:"feature"`
	DesignVolume           float64 `json:"design_volume"`            // m3 compacted
	BorrowSourceID         string  `json:"borrow_source_id"`         // planned source of the rest; empty for none
	DesignShrinkagePercent float64 `json:"design_shrinkage_percent"` // under the project's basis; zero for none
}

// MoistureBasis says how a spec's moisture window is written.
type MoistureBasis string

// The moisture bases.
const (
	// PointsOfOptimum bounds w - w_opt, in percentage points (the default).
	PointsOfOptimum MoistureBasis = "points_of_optimum"
	// PercentOfOptimum bounds w / w_opt x 100.
	PercentOfOptimum MoistureBasis = "percent_of_optimum"
)

// Spec is an acceptance specification. Limits are kept as written:
// conformance is decided on each value rounded to the last place of its
// limit (AASHTO R 11 / ASTM E29), so 94.6 conforms to "95" and not to
// "95.0".
type Spec struct {
	ID                string        `json:"id"` // empty: the store makes one
	Name              string        `json:"name"`
	MinCompaction     string        `json:"min_compaction"` // minimum relative compaction, percent, e.g. "95"; empty for none
	MoistureBasis     MoistureBasis `json:"moisture_basis"`
	MoistureLow       string        `json:"moisture_low"`       // e.g. "-2"; empty for none
	MoistureHigh      string        `json:"moisture_high"`      // e.g. "2"; empty for none
	SuspectCompaction float64       `json:"suspect_compaction"` // percent; results above it are flagged (zero means 105)
	VolumePerTest     float64       `json:"volume_per_test"`    // m3 of compacted fill per test required; zero for none
	AreaPerTest       float64       `json:"area_per_test"`      // m2 of lift per test required; zero for none
	LengthPerTest     float64       `json:"length_per_test"`    // m of alignment per test required; zero for none
	MinTestsPerLift   uint32        `json:"min_tests_per_lift"` // fewest tests on any lift; zero for none
	// LotAcceptancePWL is the percent within limits a lot must reach;
	// zero for none.
	LotAcceptancePWL float64 `json:"lot_acceptance_pwl"`
}

// Standard is a laboratory compaction test standard.
type Standard string

// The compaction standards. D698 and T 99 are standard effort; D1557 and
// T 180 are modified effort.
const (
	ASTMD698   Standard = "ASTM D698"
	ASTMD1557  Standard = "ASTM D1557"
	AASHTOT99  Standard = "AASHTO T 99"
	AASHTOT180 Standard = "AASHTO T 180"
)

// CurvePoint is one point of a laboratory compaction curve.
type CurvePoint struct {
	Moisture   float64 `json:"moisture"`    // percent
	DryDensity float64 `json:"dry_density"` // kg/m3
}

// Reference is a laboratory compaction reference: the procedure (standard,
// method letter, edition), the curve's points, and the maximum dry density
// and optimum moisture as reported, or zero to use the peak fitted to the
// points.
type Reference struct {
	ID              string       `json:"id"` // empty: the store makes one
	Material        string       `json:"material"`
	LabSampleID     string       `json:"lab_sample_id"`
	Standard        Standard     `json:"standard"`
	Method          string       `json:"method"`  // the method letter, "A" to "D"
	Edition         int          `json:"edition"` // the edition's year, e.g. 2012; zero if unknown
	Points          []CurvePoint `json:"points"`
	MaxDryDensity   float64      `json:"max_dry_density"`  // kg/m3
	OptimumMoisture float64      `json:"optimum_moisture"` // percent
	SpecificGravity float64      `json:"specific_gravity"` // of the soil solids; zero if unknown
}

// EquipmentKind is a kind of test equipment.
type EquipmentKind string

// The kinds of equipment.
const (
	NuclearGaugeEquipment  EquipmentKind = "nuclear_gauge"
	SandConeApparatus      EquipmentKind = "sand_cone"
	DriveCylinderSet       EquipmentKind = "drive_cylinder"
	RubberBalloonApparatus EquipmentKind = "rubber_balloon"
	Balance                EquipmentKind = "balance"
)

// Equipment is a piece of test equipment; registering it again with the
// same id records a recalibration.
type Equipment struct {
	ID             string        `json:"id"` // empty: the store makes one
	Kind           EquipmentKind `json:"kind"`
	Model          string        `json:"model"`
	SerialNumber   string        `json:"serial_number"`
	CalibrationDue string        `json:"calibration_due"` // YYYY-MM-DD
}

// StandardCount is a nuclear gauge's daily standard count.
type StandardCount struct {
	EquipmentID   string  `json:"equipment_id"`
	Date          string  `json:"date"` // YYYY-MM-DD, the project's time zone
	DensityCount  float64 `json:"density_count"`
	MoistureCount float64 `json:"moisture_count"`
	Accepted      bool    `json:"accepted"`
}

// CorrectionKind says how a moisture correction applies.
type CorrectionKind string

// The kinds of moisture correction.
const (
	// OffsetCorrection adds a number of percentage points to the gauge's
	// moisture.
	OffsetCorrection CorrectionKind = "offset"
	// FactorCorrection multiplies the gauge's moisture by a ratio.
	FactorCorrection CorrectionKind = "factor"
)

// MoisturePair is one comparison of a gauge's moisture with the oven-dry
// moisture of the same material, both percent.
type MoisturePair struct {
	Gauge float64 `json:"gauge"`
	Oven  float64 `json:"oven"`
}

// MoistureCorrection adjusts a nuclear gauge's moisture for one material
// and gauge, established from paired oven-dry tests (ASTM D6938 annex).
type MoistureCorrection struct {
	ID          string         `json:"id"` // empty: the store makes one
	EquipmentID string         `json:"equipment_id"`
	ReferenceID string         `json:"reference_id"` // the material's laboratory reference
	Kind        CorrectionKind `json:"kind"`         // offset or factor
	Value       float64        `json:"value"`        // points for an offset, a ratio for a factor
	Pairs       []MoisturePair `json:"pairs"`
}

// BorrowSource is a borrow source with its in-place (bank) density tests.
type BorrowSource struct {
	ID              string     `json:"id"` // empty: the store makes one
	Name            string     `json:"name"`
	BankTests       []Readings `json:"bank_tests"`
	LooseDryDensity float64    `json:"loose_dry_density"` // kg/m3 in the hauling units; zero if not measured
	ReferenceID     string     `json:"reference_id"`
}

// StationRange is a lift's extent along the alignment, metres.
type StationRange struct {
	From        float64 `json:"from"`
	To          float64 `json:"to"`
	OffsetLeft  float64 `json:"offset_left"`
	OffsetRight float64 `json:"offset_right"`
}

// Placement is a lift placed and compacted.
type Placement struct {
	ID              string        `json:"id"` // empty: the store makes one
	Feature         string        `json:"feature"`
	LiftNumber      uint32        `json:"lift_number"`
	Stations        *StationRange `json:"stations,omitempty"`
	Area            float64       `json:"area"`             // m2
	Thickness       float64       `json:"thickness"`        // m
	CompactedVolume float64       `json:"compacted_volume"` // m3
	BorrowSourceID  string        `json:"borrow_source_id"`
	PlacedOn        string        `json:"placed_on"` // YYYY-MM-DD
	SpecID          string        `json:"spec_id"`   // the spec the lift is tested against, for its test frequency; empty for none
}

// Haul is a count of loads hauled from a borrow source.
type Haul struct {
	ID                 string  `json:"id"` // empty: the store makes one
	BorrowSourceID     string  `json:"borrow_source_id"`
	Loads              uint32  `json:"loads"`
	LooseVolumePerLoad float64 `json:"loose_volume_per_load"` // m3
	PlacementID        string  `json:"placement_id"`
	HauledOn           string  `json:"hauled_on"` // YYYY-MM-DD
}

// Decision is an office review's outcome.
type Decision string

// The review decisions.
const (
	Approve Decision = "approve" // approved for the record
	Return  Decision = "return"  // sent back to the inspector, with a comment
)
