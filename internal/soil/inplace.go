package soil

import (
	"fmt"
	"math"

	"tamp/internal/valid"
)

// Method is an in-place density test method.
type Method string

// The in-place methods tamp computes.
const (
	NuclearDirect       Method = "nuclear_direct"      // ASTM D6938, probe in a punched hole
	NuclearBackscatter  Method = "nuclear_backscatter" // ASTM D6938, gauge on the surface
	SandConeMethod      Method = "sand_cone"           // ASTM D1556, AASHTO T 191
	DriveCylinderMethod Method = "drive_cylinder"      // ASTM D2937
	RubberBalloonMethod Method = "rubber_balloon"      // ASTM D2167
	MeasuredWetDensity  Method = "wet_density"         // a wet density measured by other means
)

// Step is one intermediate value of a test's arithmetic, kept so a reviewer
// can follow how the result was reached.
type Step struct {
	Name     string   // e.g. "sand in hole"
	Value    float64  // SI
	Quantity Quantity // how to show it
}

// InPlace is the result of an in-place density test.
type InPlace struct {
	Method     Method
	WetDensity float64 // kg/m3
	DryDensity float64 // kg/m3
	Moisture   float64 // percent, after any correction
	// GaugeMoisture is the nuclear gauge's own moisture before correction
	// (percent); zero for other methods.
	GaugeMoisture float64
	// MoistureCorrected is false for a nuclear moisture used as read, which
	// the grade flags: D6938 moisture depends on the material's chemistry.
	MoistureCorrected bool
	// ProbeDepth is the direct-transmission depth in metres (0 for backscatter).
	ProbeDepth float64
	Steps      []Step
}

// stepRoom is room enough for the steps of any in-place method (a sand cone
// weighed before and after has the most, eleven), so that a computation's
// step list is allocated once.
const stepRoom = 12

// steps collects a computation's steps when they are wanted. Compute wants
// them, to show the arithmetic; Densities does not, since a projection
// grades every stored test again and would only throw them away.
type steps struct {
	list []Step
	want bool
}

func newSteps(want bool) steps {
	if !want {
		return steps{}
	}
	return steps{list: make([]Step, 0, stepRoom), want: true}
}

func (s *steps) add(st ...Step) {
	if s.want {
		s.list = append(s.list, st...)
	}
}

func finish(r InPlace, st steps) (InPlace, error) {
	dry, err := DryDensity(r.WetDensity, r.Moisture)
	if err != nil {
		return InPlace{}, err
	}
	r.DryDensity = dry
	st.add(Step{"wet density", r.WetDensity, Density}, Step{"moisture", r.Moisture, Percent},
		Step{"dry density = wet / (1 + w)", dry, Density})
	r.Steps = st.list
	return r, nil
}

// NuclearReading is one count of a nuclear gauge, as the gauge reports it.
type NuclearReading struct {
	WetDensity     float64 // kg/m3
	WaterPerVolume float64 // mass of water per unit volume M, kg/m3
}

// MaxProbeDepth is the deepest direct-transmission depth ASTM D6938 sec. 1.2
// covers: 300 mm or 12 in (the larger, 304.8 mm, is allowed so a 12 in rod
// position is accepted).
const MaxProbeDepth = 12 * Inch

// DefaultReadingAgreement is the default largest difference between two wet
// densities taken at 90 degrees that may be averaged: 32 kg/m3 (2 pcf),
// common practice (from memory, not a single source).
const DefaultReadingAgreement = 32.0

// Nuclear is a nuclear moisture-density gauge test (ASTM D6938). Moisture is
// always measured in backscatter geometry whatever the density mode (D6938
// sec. 1.1). Nuclear gauges hold licensed radioactive sources: their use,
// transport and storage follow the licensee's radiation-safety programme.
type Nuclear struct {
	Backscatter bool // surface geometry; otherwise direct transmission
	// ProbeDepth is the direct-transmission depth, m (up to 300 mm / 12 in);
	// zero when it was not recorded (then the lift-depth check cannot run).
	ProbeDepth float64
	// Readings holds one reading, or two taken with the gauge turned 90
	// degrees, which are averaged when their wet densities agree within
	// Agreement.
	Readings  []NuclearReading
	Agreement float64 // kg/m3; zero means DefaultReadingAgreement
	// Correction, when set, adjusts the gauge's moisture for the material.
	Correction *MoistureCorrection
	// OvenMoisture, when set, replaces the gauge's moisture with an oven-dry
	// moisture (percent) of the same material.
	OvenMoisture *float64
}

// Compute returns the wet and dry density and moisture of the test, with
// the arithmetic's steps.
func (n Nuclear) Compute() (InPlace, error) { return n.compute(true) }

// Densities is Compute without the steps (Steps nil), for a caller that
// does not show them.
func (n Nuclear) Densities() (InPlace, error) { return n.compute(false) }

func (n Nuclear) compute(want bool) (InPlace, error) {
	r := InPlace{Method: NuclearDirect}
	st := newSteps(want)
	if n.Backscatter {
		r.Method = NuclearBackscatter
		if n.ProbeDepth != 0 {
			return InPlace{}, fmt.Errorf("soil: nuclear: %w", valid.Fail("probe_depth", n.ProbeDepth, "must be zero in backscatter"))
		}
	} else if n.ProbeDepth != 0 {
		if err := valid.Positive("probe_depth", n.ProbeDepth); err != nil {
			return InPlace{}, fmt.Errorf("soil: nuclear: %w", err)
		}
		if n.ProbeDepth > MaxProbeDepth+1e-12 {
			return InPlace{}, fmt.Errorf("soil: nuclear: %w", valid.Fail("probe_depth", n.ProbeDepth,
				"must be at most 300 mm (12 in), the deepest direct transmission of ASTM D6938"))
		}
		r.ProbeDepth = n.ProbeDepth
		st.add(Step{"probe depth", n.ProbeDepth, Depth})
	}
	if len(n.Readings) < 1 || len(n.Readings) > 2 {
		return InPlace{}, fmt.Errorf("soil: nuclear: %w", valid.Fail("readings", float64(len(n.Readings)), "must be one reading or two taken at 90 degrees"))
	}
	var wet, m float64
	for i, rd := range n.Readings {
		if _, _, err := NuclearMoisture(rd.WetDensity, rd.WaterPerVolume); err != nil {
			return InPlace{}, fmt.Errorf("soil: nuclear: reading %d: %w", i+1, err)
		}
		wet += rd.WetDensity
		m += rd.WaterPerVolume
	}
	if len(n.Readings) == 2 {
		tol := n.Agreement
		if tol == 0 {
			tol = DefaultReadingAgreement
		}
		if err := valid.Positive("agreement", tol); err != nil {
			return InPlace{}, fmt.Errorf("soil: nuclear: %w", err)
		}
		if d := math.Abs(n.Readings[0].WetDensity - n.Readings[1].WetDensity); d > tol {
			return InPlace{}, fmt.Errorf("soil: nuclear: %w", valid.Fail("readings", d,
				fmt.Sprintf("the two readings' wet densities differ by more than %.1f kg/m3; retake the test", tol)))
		}
		wet /= 2
		m /= 2
		st.add(Step{"wet density, mean of two readings", wet, Density})
	}
	_, gw, err := NuclearMoisture(wet, m)
	if err != nil {
		return InPlace{}, fmt.Errorf("soil: nuclear: %w", err)
	}
	r.WetDensity = wet
	r.GaugeMoisture = gw
	r.Moisture = gw
	st.add(Step{"water per volume M", m, Density}, Step{"gauge dry density = wet - M", wet - m, Density},
		Step{"gauge moisture = M / dry", gw, Percent})
	switch {
	case n.OvenMoisture != nil:
		if err := checkMoisture("oven_moisture", *n.OvenMoisture); err != nil {
			return InPlace{}, fmt.Errorf("soil: nuclear: %w", err)
		}
		r.Moisture = *n.OvenMoisture
		r.MoistureCorrected = true
		st.add(Step{"oven moisture used instead", r.Moisture, Percent})
	case n.Correction != nil:
		w, err := n.Correction.Apply(gw)
		if err != nil {
			return InPlace{}, fmt.Errorf("soil: nuclear: %w", err)
		}
		r.Moisture = w
		r.MoistureCorrected = true
		st.add(Step{"corrected moisture", w, Percent})
	}
	return finish(r, st)
}

// SandCone is a sand-cone test (ASTM D1556, AASHTO T 191). Give either
// SandUsed, or the apparatus masses before and after.
type SandCone struct {
	SandDensity    float64 // bulk density of the calibrated sand, kg/m3
	InitialMass    float64 // apparatus with sand before the test, kg
	FinalMass      float64 // apparatus with the sand left after, kg
	SandUsed       float64 // sand that left the apparatus, kg (instead of Initial/Final)
	ConeCorrection float64 // sand that fills the cone and base plate, kg
	SoilMass       float64 // moist soil dug from the hole, kg
	Moisture       float64 // percent
}

// Compute returns the test's densities, with sand used, sand in the hole and
// the hole's volume as steps.
func (s SandCone) Compute() (InPlace, error) { return s.compute(true) }

// Densities is Compute without the steps (Steps nil), for a caller that
// does not show them.
func (s SandCone) Densities() (InPlace, error) { return s.compute(false) }

func (s SandCone) compute(want bool) (InPlace, error) {
	if err := valid.First(valid.Positive("sand_density", s.SandDensity), valid.NonNegative("cone_correction", s.ConeCorrection),
		valid.Positive("soil_mass", s.SoilMass), checkMoisture("moisture", s.Moisture),
		valid.NonNegative("sand_used", s.SandUsed), valid.NonNegative("initial_mass", s.InitialMass),
		valid.NonNegative("final_mass", s.FinalMass)); err != nil {
		return InPlace{}, fmt.Errorf("soil: sand cone: %w", err)
	}
	used := s.SandUsed
	st := newSteps(want)
	switch {
	case used > 0 && (s.InitialMass != 0 || s.FinalMass != 0):
		return InPlace{}, fmt.Errorf("soil: sand cone: %w", valid.Fail("sand_used", used, "give sand_used or initial_mass and final_mass, not both"))
	case used == 0:
		if s.InitialMass <= 0 {
			return InPlace{}, fmt.Errorf("soil: sand cone: %w", valid.Missing("sand_used", "is required (or initial_mass and final_mass)"))
		}
		if s.FinalMass >= s.InitialMass {
			return InPlace{}, fmt.Errorf("soil: sand cone: %w", valid.Fail("final_mass", s.FinalMass, "must be less than initial_mass"))
		}
		used = s.InitialMass - s.FinalMass
		st.add(Step{"apparatus before", s.InitialMass, Mass}, Step{"apparatus after", s.FinalMass, Mass})
	}
	inHole := used - s.ConeCorrection
	if inHole <= 0 {
		return InPlace{}, fmt.Errorf("soil: sand cone: %w", valid.Fail("cone_correction", s.ConeCorrection, "must be less than the sand used"))
	}
	vol := inHole / s.SandDensity
	st.add(Step{"sand used", used, Mass}, Step{"cone correction", s.ConeCorrection, Mass},
		Step{"sand in hole = used - cone", inHole, Mass}, Step{"sand bulk density", s.SandDensity, Density},
		Step{"hole volume = sand in hole / sand density", vol, SmallVolume}, Step{"soil from hole", s.SoilMass, Mass})
	return finish(InPlace{Method: SandConeMethod, WetDensity: s.SoilMass / vol, Moisture: s.Moisture}, st)
}

// SandCalibration is one bulk-density determination of the test sand: the
// mass of sand that fills a container of known volume.
type SandCalibration struct {
	ContainerVolume float64 // m3
	SandMass        float64 // kg
}

// SandAgreement is the largest spread between sand bulk-density
// calibrations that may be averaged: 1 % (AASHTO T 191 sec. 3.3).
const SandAgreement = 1.0

// SandDensity returns the mean bulk density of the calibrations, refusing
// calibrations whose spread (max - min, as a percent of the mean) exceeds 1 %.
func SandDensity(cals []SandCalibration) (float64, error) {
	if len(cals) == 0 {
		return 0, fmt.Errorf("soil: sand density: %w", valid.Missing("calibrations", "at least one is required"))
	}
	lo, hi, sum := math.Inf(1), math.Inf(-1), 0.0
	for i, c := range cals {
		if err := valid.First(valid.Positive(fmt.Sprintf("calibrations[%d].container_volume", i), c.ContainerVolume),
			valid.Positive(fmt.Sprintf("calibrations[%d].sand_mass", i), c.SandMass)); err != nil {
			return 0, fmt.Errorf("soil: sand density: %w", err)
		}
		d := c.SandMass / c.ContainerVolume
		lo, hi, sum = math.Min(lo, d), math.Max(hi, d), sum+d
	}
	mean := sum / float64(len(cals))
	if spread := 100 * (hi - lo) / mean; spread > SandAgreement {
		return 0, fmt.Errorf("soil: sand density: %w", valid.Fail("calibrations", spread,
			"spread (percent of the mean) must be within 1 % (AASHTO T 191 sec. 3.3); recalibrate"))
	}
	return mean, nil
}

// DriveCylinder is a drive-cylinder test (ASTM D2937).
type DriveCylinder struct {
	Diameter float64 // inside diameter, m
	Length   float64 // length of the soil core (the cylinder's), m
	SoilMass float64 // moist soil in the cylinder, kg
	Moisture float64 // percent
}

// Compute returns the densities with the cylinder's volume as a step.
func (d DriveCylinder) Compute() (InPlace, error) { return d.compute(true) }

// Densities is Compute without the steps (Steps nil), for a caller that
// does not show them.
func (d DriveCylinder) Densities() (InPlace, error) { return d.compute(false) }

func (d DriveCylinder) compute(want bool) (InPlace, error) {
	if err := valid.First(valid.Positive("diameter", d.Diameter), valid.Positive("length", d.Length),
		valid.Positive("soil_mass", d.SoilMass), checkMoisture("moisture", d.Moisture)); err != nil {
		return InPlace{}, fmt.Errorf("soil: drive cylinder: %w", err)
	}
	vol := math.Pi * d.Diameter * d.Diameter / 4 * d.Length
	st := newSteps(want)
	st.add(Step{"cylinder volume = pi d^2 / 4 x length", vol, SmallVolume}, Step{"soil in cylinder", d.SoilMass, Mass})
	return finish(InPlace{Method: DriveCylinderMethod, WetDensity: d.SoilMass / vol, Moisture: d.Moisture}, st)
}

// RubberBalloon is a rubber-balloon test (ASTM D2167): the apparatus's
// volume readings before and after the hole is dug.
type RubberBalloon struct {
	InitialReading float64 // m3
	FinalReading   float64 // m3
	SoilMass       float64 // moist soil from the hole, kg
	Moisture       float64 // percent
}

// Compute returns the densities with the hole's volume as a step.
func (b RubberBalloon) Compute() (InPlace, error) { return b.compute(true) }

// Densities is Compute without the steps (Steps nil), for a caller that
// does not show them.
func (b RubberBalloon) Densities() (InPlace, error) { return b.compute(false) }

func (b RubberBalloon) compute(want bool) (InPlace, error) {
	if err := valid.First(valid.NonNegative("initial_reading", b.InitialReading), valid.Positive("final_reading", b.FinalReading),
		valid.Positive("soil_mass", b.SoilMass), checkMoisture("moisture", b.Moisture)); err != nil {
		return InPlace{}, fmt.Errorf("soil: rubber balloon: %w", err)
	}
	vol := b.FinalReading - b.InitialReading
	if vol <= 0 {
		return InPlace{}, fmt.Errorf("soil: rubber balloon: %w", valid.Fail("final_reading", b.FinalReading, "must exceed initial_reading (zero hole volume)"))
	}
	st := newSteps(want)
	st.add(Step{"initial reading", b.InitialReading, SmallVolume}, Step{"final reading", b.FinalReading, SmallVolume},
		Step{"hole volume = final - initial", vol, SmallVolume}, Step{"soil from hole", b.SoilMass, Mass})
	return finish(InPlace{Method: RubberBalloonMethod, WetDensity: b.SoilMass / vol, Moisture: b.Moisture}, st)
}

// WetDensityTest is a wet density measured by some other means and entered
// as it is, with its moisture.
type WetDensityTest struct {
	WetDensity float64 // kg/m3
	Moisture   float64 // percent
}

// Compute returns the dry density, with the wet density, moisture and dry
// density as steps.
func (t WetDensityTest) Compute() (InPlace, error) { return t.compute(true) }

// Densities is Compute without the steps (Steps nil), for a caller that
// does not show them.
func (t WetDensityTest) Densities() (InPlace, error) { return t.compute(false) }

func (t WetDensityTest) compute(want bool) (InPlace, error) {
	if err := valid.First(valid.Positive("wet_density", t.WetDensity), checkMoisture("moisture", t.Moisture)); err != nil {
		return InPlace{}, fmt.Errorf("soil: wet density: %w", err)
	}
	return finish(InPlace{Method: MeasuredWetDensity, WetDensity: t.WetDensity, Moisture: t.Moisture}, newSteps(want))
}
