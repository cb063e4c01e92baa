package soil

import (
	"math"
	"math/rand/v2"
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
