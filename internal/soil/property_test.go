package soil

import (
	"math"
	"math/rand/v2"
	"reflect"
	"testing"
)

// Property: dry density never exceeds wet density for any moisture 0-100 %.
func TestPropertyDryNotAboveWet(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for range 10000 {
		wet := 500 + rng.Float64()*2500
		w := rng.Float64() * MaxMoisture
		dry, err := DryDensity(wet, w)
		if err != nil {
			t.Fatal(err)
		}
		if dry > wet {
			t.Fatalf("DryDensity(%v, %v) = %v, above wet", wet, w, dry)
		}
	}
}

// Property: the oversize correction and its inverse round-trip.
func TestPropertyOversizeRoundTrip(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for range 10000 {
		fine := 1300 + rng.Float64()*900
		o := Oversize{Percent: rng.Float64() * 60, BulkGs: 2.3 + rng.Float64()*0.7, Moisture: rng.Float64() * 4}
		mdd, _, err := CorrectForOversize(fine, 12, o, Water1000)
		if err != nil {
			t.Fatal(err)
		}
		back, err := FineFraction(mdd, o, Water1000)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(back-fine) > 1e-9*fine {
			t.Fatalf("round trip of %v with %+v = %v", fine, o, back)
		}
		if o.BulkGs*Water1000 > fine && mdd < fine {
			t.Fatalf("oversize denser than the fines lowered the MDD: %v -> %v", fine, mdd)
		}
	}
}

// Property: every in-place method gives dry <= wet and finite results for
// random valid inputs.
func TestPropertyMethodsFinite(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for range 2000 {
		w := rng.Float64() * 40
		tests := []interface{ Compute() (InPlace, error) }{
			SandCone{SandDensity: 1400 + rng.Float64()*200, SandUsed: 3 + rng.Float64()*3, ConeCorrection: 1.5, SoilMass: 2 + rng.Float64()*3, Moisture: w},
			DriveCylinder{Diameter: 0.1016, Length: 0.127, SoilMass: 1.5 + rng.Float64(), Moisture: w},
			RubberBalloon{InitialReading: 1e-3, FinalReading: 2e-3 + rng.Float64()*1e-3, SoilMass: 2 + rng.Float64()*2, Moisture: w},
			Nuclear{ProbeDepth: 0.2, Readings: []NuclearReading{{1800 + rng.Float64()*400, 100 + rng.Float64()*200}}},
		}
		for _, tc := range tests {
			r, err := tc.Compute()
			if err != nil {
				t.Fatalf("%T: %v", tc, err)
			}
			if r.DryDensity > r.WetDensity || math.IsNaN(r.DryDensity) || math.IsInf(r.DryDensity, 0) {
				t.Fatalf("%T: wet %v dry %v", tc, r.WetDensity, r.DryDensity)
			}
		}
	}
}

// Property: Densities gives what Compute gives, results and errors alike,
// only without the steps, for valid and invalid inputs of every method.
func TestPropertyDensitiesIsComputeWithoutSteps(t *testing.T) {
	type method interface {
		Compute() (InPlace, error)
		Densities() (InPlace, error)
	}
	rng := rand.New(rand.NewPCG(7, 8))
	some := func(lo, hi float64) float64 { // now and then out of range, to reach the errors
		if rng.IntN(8) == 0 {
			return -rng.Float64() * hi
		}
		return lo + rng.Float64()*(hi-lo)
	}
	for range 2000 {
		w := some(0, 40)
		oven := some(0, 30)
		two := []NuclearReading{{some(1800, 2200), some(100, 300)}, {some(1800, 2200), some(100, 300)}}
		tests := []method{
			SandCone{SandDensity: some(1400, 1600), SandUsed: some(3, 6), ConeCorrection: 1.5, SoilMass: some(2, 5), Moisture: w},
			SandCone{SandDensity: some(1400, 1600), InitialMass: some(8, 10), FinalMass: some(3, 6), ConeCorrection: some(1, 2), SoilMass: some(2, 5), Moisture: w},
			DriveCylinder{Diameter: some(0.05, 0.12), Length: some(0.1, 0.15), SoilMass: some(1.5, 2.5), Moisture: w},
			RubberBalloon{InitialReading: some(0, 1e-3), FinalReading: some(1e-3, 3e-3), SoilMass: some(2, 4), Moisture: w},
			WetDensityTest{WetDensity: some(1600, 2400), Moisture: w},
			Nuclear{ProbeDepth: some(0, 0.3), Readings: two[:1]},
			Nuclear{Backscatter: true, Readings: two, Agreement: some(0, 400), OvenMoisture: &oven},
			Nuclear{ProbeDepth: 0.2, Readings: two, Agreement: 500, Correction: &MoistureCorrection{Kind: Offset, Value: some(-3, 3)}},
		}
		for _, tc := range tests {
			full, ferr := tc.Compute()
			bare, berr := tc.Densities()
			if (ferr == nil) != (berr == nil) || (ferr != nil && ferr.Error() != berr.Error()) {
				t.Fatalf("%+v: Compute() error %v, Densities() error %v", tc, ferr, berr)
			}
			if ferr != nil {
				continue
			}
			if len(full.Steps) == 0 || bare.Steps != nil {
				t.Fatalf("%+v: Compute() gave %d steps, Densities() %d, want some and none", tc, len(full.Steps), len(bare.Steps))
			}
			full.Steps = nil
			if !reflect.DeepEqual(full, bare) {
				t.Fatalf("%+v: Densities()=%+v, want %+v", tc, bare, full)
			}
		}
	}
}
