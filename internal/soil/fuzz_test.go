package soil

import (
	"errors"
	"math"
	"testing"

	"tamp/internal/valid"
)

// checkResult fails unless err is an input error or r is finite with dry <= wet.
func checkResult(t *testing.T, r InPlace, err error) {
	t.Helper()
	if err != nil {
		if !errors.Is(err, valid.ErrInput) {
			t.Fatalf("error is not an input error: %v", err)
		}
		return
	}
	for _, v := range []float64{r.WetDensity, r.DryDensity, r.Moisture} {
		if math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
			t.Fatalf("non-finite or negative result %+v", r)
		}
	}
	if r.DryDensity > r.WetDensity*(1+1e-12) {
		t.Fatalf("dry above wet: %+v", r)
	}
}

func FuzzSandCone(f *testing.F) {
	f.Add(1585.9, 0.0, 0.0, 3.175, 0.2404, 3.6786, 11.11)
	f.Add(1450.0, 7.5, 3.41, 0.0, 1.58, 3.65, 10.5)
	f.Add(-1.0, math.NaN(), 0.0, math.Inf(1), 0.0, 0.0, 200.0)
	f.Fuzz(func(t *testing.T, sd, initial, final, used, cone, soilMass, w float64) {
		r, err := SandCone{SandDensity: sd, InitialMass: initial, FinalMass: final, SandUsed: used, ConeCorrection: cone, SoilMass: soilMass, Moisture: w}.Compute()
		checkResult(t, r, err)
	})
}

func FuzzNuclear(f *testing.F) {
	f.Add(false, 0.2, 2082.4, 224.3, 2090.0, 230.0, 0.0, 1.4, 0.0)
	f.Add(true, 0.0, 2000.0, 150.0, 0.0, 0.0, 32.0, 0.0, 13.5)
	f.Add(false, 0.4, math.NaN(), -1.0, 1.0, 1.0, -5.0, math.Inf(-1), -3.0)
	f.Fuzz(func(t *testing.T, back bool, depth, wet1, m1, wet2, m2, agree, offset, oven float64) {
		n := Nuclear{Backscatter: back, ProbeDepth: depth, Readings: []NuclearReading{{wet1, m1}}, Agreement: agree}
		if wet2 != 0 {
			n.Readings = append(n.Readings, NuclearReading{wet2, m2})
		}
		if offset != 0 {
			n.Correction = &MoistureCorrection{Kind: Offset, Value: offset}
		}
		if oven != 0 {
			n.OvenMoisture = &oven
		}
		r, err := n.Compute()
		checkResult(t, r, err)
	})
}

func FuzzSimpleMethods(f *testing.F) {
	f.Add(0.1016, 0.127, 2.15, 15.0, 1.02e-3, 2.85e-3, 2000.0)
	f.Add(0.0, -1.0, math.NaN(), 101.0, 3e-3, 1e-3, math.Inf(1))
	f.Fuzz(func(t *testing.T, dia, length, mass, w, r0, r1, wet float64) {
		r, err := DriveCylinder{Diameter: dia, Length: length, SoilMass: mass, Moisture: w}.Compute()
		checkResult(t, r, err)
		r, err = RubberBalloon{InitialReading: r0, FinalReading: r1, SoilMass: mass, Moisture: w}.Compute()
		checkResult(t, r, err)
		r, err = WetDensityTest{WetDensity: wet, Moisture: w}.Compute()
		checkResult(t, r, err)
		_, err = OvenDry{Tare: r0, WetWithTare: mass, DryWithTare: length}.Compute()
		if err != nil && !errors.Is(err, valid.ErrInput) {
			t.Fatal(err)
		}
		if p, err := PhaseRelations(wet, w, dia*30, 1000); err == nil && (math.IsNaN(p.Saturation) || p.VoidRatio <= 0) {
			t.Fatalf("phase relations %+v", p)
		} else if err != nil && !errors.Is(err, valid.ErrInput) {
			t.Fatal(err)
		}
	})
}

func FuzzFitCurve(f *testing.F) {
	f.Add(9.0, 1800.0, 11.0, 1850.0, 13.0, 1870.0, 15.0, 1840.0, 2.65)
	f.Add(9.0, 1800.0, 9.0, 1850.0, 13.0, 1870.0, 15.0, math.NaN(), 0.0)
	f.Fuzz(func(t *testing.T, w1, d1, w2, d2, w3, d3, w4, d4, gs float64) {
		c := Curve{Points: []CurvePoint{{w1, d1}, {w2, d2}, {w3, d3}, {w4, d4}}, Gs: gs, Water: Water1000}
		fit, err := FitCurve(c)
		if err != nil {
			if !errors.Is(err, valid.ErrInput) {
				t.Fatal(err)
			}
			return
		}
		if math.IsNaN(fit.MaxDryDensity) || math.IsNaN(fit.OptimumMoisture) {
			t.Fatalf("NaN fit %+v", fit)
		}
	})
}

func FuzzOversizeAndOnePoint(f *testing.F) {
	f.Add(1922.2, 14.0, 20.0, 2.65, 2.0, 13.0, 1762.0)
	f.Add(0.0, -1.0, 100.0, 1.0, math.NaN(), 200.0, math.Inf(1))
	fam := family()
	f.Fuzz(func(t *testing.T, mdd, omc, pct, gs, wc, w, dry float64) {
		o := Oversize{Percent: pct, BulkGs: gs, Moisture: wc}
		m, om, err := CorrectForOversize(mdd, omc, o, Water1000)
		if err == nil && (math.IsNaN(m) || math.IsNaN(om) || m <= 0) {
			t.Fatalf("CorrectForOversize = %v %v", m, om)
		} else if err != nil && !errors.Is(err, valid.ErrInput) {
			t.Fatal(err)
		}
		if _, err := FineFraction(mdd, o, Water1000); err != nil && !errors.Is(err, valid.ErrInput) {
			t.Fatal(err)
		}
		op, err := fam.OnePoint(w, dry)
		if err == nil && (op.PercentOfOptimum < OnePointLowPercent || op.PercentOfOptimum > OnePointHighPercent) {
			t.Fatalf("one-point accepted at %v %% of optimum", op.PercentOfOptimum)
		} else if err != nil && !errors.Is(err, valid.ErrInput) {
			t.Fatal(err)
		}
	})
}

func FuzzCalibrationsAndCorrections(f *testing.F) {
	f.Add(1e-3, 1.45, 1e-3, 1.46, 12.07, 13.5, 20.0, true)
	f.Add(0.0, -1.0, math.NaN(), 1.0, 0.0, 200.0, -10.0, false)
	f.Fuzz(func(t *testing.T, v1, m1, v2, m2, gauge, oven, temp float64, offset bool) {
		if d, err := SandDensity([]SandCalibration{{v1, m1}, {v2, m2}}); err == nil && (d <= 0 || math.IsNaN(d)) {
			t.Fatalf("SandDensity = %v", d)
		} else if err != nil && !errors.Is(err, valid.ErrInput) {
			t.Fatal(err)
		}
		k := Factor
		if offset {
			k = Offset
		}
		c, err := DeriveCorrection(k, []MoisturePair{{gauge, oven}})
		if err != nil && !errors.Is(err, valid.ErrInput) {
			t.Fatal(err)
		}
		if err == nil {
			if w, err := c.Apply(gauge); err == nil && (w < 0 || w > MaxMoisture) {
				t.Fatalf("corrected moisture %v", w)
			} else if err != nil && !errors.Is(err, valid.ErrInput) {
				t.Fatal(err)
			}
		}
		if w, err := WaterAt(temp); err == nil && (w < 990 || w > 1000) {
			t.Fatalf("WaterAt(%v) = %v", temp, w)
		} else if err != nil && !errors.Is(err, valid.ErrInput) {
			t.Fatal(err)
		}
	})
}

func FuzzNamesAndPhase(f *testing.F) {
	f.Add("ASTM D698", "A", 2012, "us", 2.65, 12.0, 1000.0)
	f.Add("AASHTO T 180", "d", 1999, "si", 1.0, -3.0, 0.0)
	f.Add("", "Z", -1, "metric", math.NaN(), math.Inf(1), -1.0)
	f.Fuzz(func(t *testing.T, std, method string, edition int, units string, gs, w, water float64) {
		p := Procedure{Standard: Standard(std), Method: method, Edition: edition}
		if sc, err := p.Scope(); err == nil {
			if sc.MaxOversize <= 0 || sc.Blows <= 0 {
				t.Fatalf("scope %+v", sc)
			}
			if _, err := p.InScope(w); err != nil {
				t.Fatal(err)
			}
		} else if !errors.Is(err, valid.ErrInput) {
			t.Fatal(err)
		}
		if _, err := ParseSystem(units); err != nil && !errors.Is(err, valid.ErrInput) {
			t.Fatal(err)
		}
		if z, err := ZeroAirVoids(gs, w, water); err == nil && (z <= 0 || math.IsNaN(z)) {
			t.Fatalf("ZeroAirVoids = %v", z)
		} else if err != nil && !errors.Is(err, valid.ErrInput) {
			t.Fatal(err)
		}
	})
}
