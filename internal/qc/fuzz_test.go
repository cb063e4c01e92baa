package qc

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"tamp/internal/soil"
	"tamp/internal/valid"
)

// Property: relative compaction rises with dry density, and a test that
// passes a minimum keeps passing when its dry density rises.
func TestPropertyCompactionMonotone(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	spec := Spec{MinCompaction: ptr(MustLimit("95"))}
	ref := Reference{MaxDryDensity: 1900, OptimumMoisture: 12}
	for range 5000 {
		d1 := 1500 + rng.Float64()*500
		d2 := d1 + rng.Float64()*50
		r1, err1 := Grade(Input{Test: soil.InPlace{DryDensity: d1, Moisture: 12}, Reference: ref, Spec: spec})
		r2, err2 := Grade(Input{Test: soil.InPlace{DryDensity: d2, Moisture: 12}, Reference: ref, Spec: spec})
		if err1 != nil || err2 != nil {
			t.Fatal(err1, err2)
		}
		if r2.RelativeCompaction < r1.RelativeCompaction {
			t.Fatalf("RC(%v) = %v > RC(%v) = %v", d1, r1.RelativeCompaction, d2, r2.RelativeCompaction)
		}
		if r1.Verdict == Pass && r2.Verdict != Pass {
			t.Fatalf("denser test fails: %v -> %v", d1, d2)
		}
	}
}

func FuzzGrade(f *testing.F) {
	f.Add(1788.0, 12.0, 1858.0, 13.5, "95", "-2", "2", 2.65, 20.0, 0.2, 0.15, false)
	f.Add(math.NaN(), -1.0, 0.0, 0.0, "x", "", "1e9", 9.0, 120.0, -1.0, 0.0, true)
	f.Fuzz(func(t *testing.T, dry, w, mdd, omc float64, minRC, lo, hi string, gs, over, depth, lift float64, pct bool) {
		in := Input{
			Test:          soil.InPlace{Method: soil.NuclearDirect, DryDensity: dry, WetDensity: dry * (1 + w/100), Moisture: w, ProbeDepth: depth},
			Reference:     Reference{MaxDryDensity: mdd, OptimumMoisture: omc},
			Gs:            gs,
			Water:         soil.Water1000,
			LiftThickness: lift,
		}
		if pct {
			in.Spec.MoistureBasis = PercentOfOptimum
		}
		for _, l := range []struct {
			s   string
			dst **Limit
		}{{minRC, &in.Spec.MinCompaction}, {lo, &in.Spec.MoistureLow}, {hi, &in.Spec.MoistureHigh}} {
			if v, err := ParseLimit("limit", l.s); err == nil {
				*l.dst = &v
			} else if !errors.Is(err, valid.ErrInput) {
				t.Fatal(err)
			}
		}
		if mdd != 0 || omc != 0 {
			in.Reference.Procedure = &soil.Procedure{Standard: soil.AASHTOT99, Method: "C"}
		}
		if over != 0 {
			in.Oversize = &soil.Oversize{Percent: over, BulkGs: 2.65, Moisture: 2}
		}
		r, err := Grade(in)
		if err != nil {
			if !errors.Is(err, valid.ErrInput) {
				t.Fatalf("error is not an input error: %v", err)
			}
			return
		}
		if in.Reference == (Reference{}) != (r.Verdict == Pending) {
			t.Fatalf("verdict %q for reference %+v", r.Verdict, in.Reference)
		}
		if r.Verdict == Pending {
			return
		}
		if (r.Verdict == Fail) != (len(r.Reasons) > 0) {
			t.Fatalf("verdict %v with reasons %v", r.Verdict, r.Reasons)
		}
		if math.IsNaN(r.RelativeCompaction) || math.IsInf(r.RelativeCompaction, 0) {
			t.Fatalf("RC %v", r.RelativeCompaction)
		}
	})
}

func FuzzPercentWithinLimits(f *testing.F) {
	f.Add(96.0, 97.5, 94.5, 98.0, 95.5, 95.0, 0.0, true, false)
	f.Add(-1.2, 0.4, 1.5, -0.3, 2.4, -2.0, 2.0, true, true)
	f.Add(1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, true, true)
	f.Fuzz(func(t *testing.T, a, b, c, d, e, lo, hi float64, useLo, useHi bool) {
		var lp, hp *float64
		if useLo {
			lp = &lo
		}
		if useHi {
			hp = &hi
		}
		lot, err := PercentWithinLimits([]float64{a, b, c, d, e}, lp, hp)
		if err != nil {
			if !errors.Is(err, valid.ErrInput) {
				t.Fatal(err)
			}
			return
		}
		if math.IsNaN(lot.PWL) || lot.PWL < 0 || lot.PWL > 100+1e-9 {
			t.Fatalf("PWL %v for %+v", lot.PWL, lot)
		}
	})
}
