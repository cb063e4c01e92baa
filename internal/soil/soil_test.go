package soil

import (
	"errors"
	"math"
	"testing"

	"tamp/internal/valid"
)

func near(t *testing.T, name string, got, want, tol float64) {
	t.Helper()
	if math.IsNaN(got) || math.Abs(got-want) > tol {
		t.Errorf("%s = %.6f, want %.6f (tol %g)", name, got, want, tol)
	}
}

func pcf(v float64) float64   { return v * PoundPerCubicFoot }
func toPcf(v float64) float64 { return v / PoundPerCubicFoot }

// A8 [pub]: exact factors from the international foot and pound (NIST SP 811
// appendix B; the document itself from memory).
func TestUnitFactorsA8(t *testing.T) {
	for _, c := range []struct {
		name      string
		got, want float64
	}{
		{"yd3 in m3", CubicYard, 0.764554857984},
		{"ft3 in m3", CubicFoot, 0.028316846592},
	} {
		if rel := math.Abs(c.got-c.want) / c.want; rel > 1e-9 {
			t.Errorf("A8 %s = %.12g, want %.12g (rel %g)", c.name, c.got, c.want, rel)
		}
	}
	// 16.018463 is printed to eight digits, so it is checked to those.
	near(t, "A8 pcf in kg/m3", PoundPerCubicFoot, 16.018463, 5e-7)
	if got := US.FromSI(Density, US.ToSI(Density, 111.6)); math.Abs(got-111.6) > 1e-12 {
		t.Errorf("pcf round trip = %v", got)
	}
	if got := SI.ToSI(Mass, 3650); math.Abs(got-3.65) > 1e-12 {
		t.Errorf("SI.ToSI(Mass, 3650 g) = %v kg, want 3.65", got)
	}
}

// Water density by the Tanaka et al. (2001) formula; 998.2067 kg/m3 at
// 20 C and the maximum, 999.975 near 4 C, are that paper's values (from memory).
func TestWaterAt(t *testing.T) {
	w20, err := WaterAt(20)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "WaterAt(20)", w20, 998.2067, 0.0005)
	w4, _ := WaterAt(4)
	near(t, "WaterAt(4)", w4, 999.975, 0.0005)
	if _, err := WaterAt(90); !errors.Is(err, valid.ErrInput) {
		t.Errorf("WaterAt(90) error = %v, want ErrInput", err)
	}
}

// A1 [formula]: ASTM D2216 / D6938 dry-density relation.
func TestDryDensityA1(t *testing.T) {
	d, err := DryDensity(pcf(125.0), 12.0)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "A1 dry pcf", toPcf(d), 111.607, 0.0005)
	if got := roundTo(toPcf(d), US.Places(Density)); got != 111.6 {
		t.Errorf("A1 reported = %v, want 111.6", got)
	}
}

func roundTo(v float64, places int) float64 {
	s := math.Pow(10, float64(places))
	return math.Round(v*s) / s
}

// A2 [formula]: ASTM D2216 moisture content.
func TestOvenDryA2(t *testing.T) {
	r, err := OvenDry{Tare: 50.00 * Gram, WetWithTare: 250.00 * Gram, DryWithTare: 225.00 * Gram}.Compute()
	if err != nil {
		t.Fatal(err)
	}
	near(t, "A2 w", r.Moisture, 14.286, 0.0005)
	near(t, "A2 water g", r.WaterMass/Gram, 25, 1e-9)
	if roundTo(r.Moisture, 1) != 14.3 {
		t.Errorf("A2 reported w = %v, want 14.3", roundTo(r.Moisture, 1))
	}
}

// A3 [formula]: zero-air-voids relation (any soil mechanics text).
func TestZeroAirVoidsA3(t *testing.T) {
	z, err := ZeroAirVoids(2.70, 15, Water624)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "A3 ZAV pcf", toPcf(z), 119.91, 0.01)
	z, _ = ZeroAirVoids(2.70, 15, Water1000)
	near(t, "A3 ZAV kg/m3", z, 1921.7, 0.05)
}

// A4 [formula]: phase relations.
func TestPhaseRelationsA4(t *testing.T) {
	p, err := PhaseRelations(pcf(110.0), 15, 2.70, Water624)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "A4 void ratio", p.VoidRatio, 0.5316, 0.0001)
	near(t, "A4 saturation", p.Saturation, 76.2, 0.1)
}

// A5 [formula]; flagging points above ZAV is [practice].
func TestAboveZeroAirVoidsA5(t *testing.T) {
	for _, c := range []struct {
		w, zav, sat float64
		above       bool
	}{{12, 125.46, 98.5, false}, {13, 122.99, 106.7, true}} {
		p, err := PhaseRelations(pcf(125.0), c.w, 2.65, Water624)
		if err != nil {
			t.Fatal(err)
		}
		near(t, "A5 ZAV", toPcf(p.ZeroAirVoids), c.zav, 0.05)
		near(t, "A5 S", p.Saturation, c.sat, 0.05)
		if got := pcf(125.0) > p.ZeroAirVoids; got != c.above {
			t.Errorf("A5 w=%v above ZAV = %v, want %v", c.w, got, c.above)
		}
	}
}

// B1 [formula]: ASTM D1556 / AASHTO T 191 (numbers from a course problem of
// low authority).
func TestSandConeB1(t *testing.T) {
	sd, err := SandDensity([]SandCalibration{{ContainerVolume: CubicFoot / 30, SandMass: 3.30 * Pound}})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "B1 sand pcf", toPcf(sd), 99.0, 1e-9)
	r, err := SandCone{SandDensity: sd, InitialMass: 10.20 * Pound, FinalMass: 3.20 * Pound,
		ConeCorrection: 0.53 * Pound, SoilMass: 8.11 * Pound, Moisture: 11.11}.Compute()
	if err != nil {
		t.Fatal(err)
	}
	near(t, "B1 hole ft3", step(t, r, "hole volume = sand in hole / sand density")/CubicFoot, 0.065354, 0.0000005)
	near(t, "B1 wet pcf", toPcf(r.WetDensity), 124.09, 0.05)
	near(t, "B1 dry pcf", toPcf(r.DryDensity), 111.69, 0.05)
}

func step(t *testing.T, r InPlace, name string) float64 {
	t.Helper()
	for _, s := range r.Steps {
		if s.Name == name {
			return s.Value
		}
	}
	t.Fatalf("no step %q in %+v", name, r.Steps)
	return 0
}

// B2 [formula]: AASHTO T 191.
func TestSandConeB2(t *testing.T) {
	r, err := SandCone{SandDensity: 1.450 * GramPerCubicCentimetre, InitialMass: 7500 * Gram, FinalMass: 3410 * Gram,
		ConeCorrection: 1580 * Gram, SoilMass: 3650 * Gram, Moisture: 10.5}.Compute()
	if err != nil {
		t.Fatal(err)
	}
	near(t, "B2 hole cm3", step(t, r, "hole volume = sand in hole / sand density")/CubicCentimetre, 1731.0, 0.05)
	near(t, "B2 wet g/cm3", r.WetDensity/GramPerCubicCentimetre, 2.109, 0.001)
	near(t, "B2 dry g/cm3", r.DryDensity/GramPerCubicCentimetre, 1.908, 0.001)
	near(t, "B2 dry pcf", toPcf(r.DryDensity), 119.1, 0.05)
}

// Sand calibrations must agree within 1 % (AASHTO T 191 sec. 3.3, [pub]).
func TestSandDensityAgreement(t *testing.T) {
	v := 1000 * CubicCentimetre
	if _, err := SandDensity([]SandCalibration{{v, 1450 * Gram}, {v, 1460 * Gram}}); err != nil {
		t.Errorf("0.7 %% spread refused: %v", err)
	}
	_, err := SandDensity([]SandCalibration{{v, 1450 * Gram}, {v, 1470 * Gram}})
	var fe *valid.FieldError
	if !errors.As(err, &fe) || fe.Field != "calibrations" {
		t.Errorf("1.4 %% spread error = %v, want a calibrations field error", err)
	}
}

// B3 [formula]: ASTM D2937 (wording from memory).
func TestDriveCylinderB3(t *testing.T) {
	r, err := DriveCylinder{Diameter: 0.1016, Length: 0.1270, SoilMass: 2150 * Gram, Moisture: 15}.Compute()
	if err != nil {
		t.Fatal(err)
	}
	near(t, "B3 volume cm3", step(t, r, "cylinder volume = pi d^2 / 4 x length")/CubicCentimetre, 1029.6, 0.05)
	near(t, "B3 wet", r.WetDensity/GramPerCubicCentimetre, 2.088, 0.001)
	near(t, "B3 dry", r.DryDensity/GramPerCubicCentimetre, 1.816, 0.001)
}

// B4 [formula]: ASTM D2167 (wording from memory).
func TestRubberBalloonB4(t *testing.T) {
	r, err := RubberBalloon{InitialReading: 1020 * CubicCentimetre, FinalReading: 2850 * CubicCentimetre, SoilMass: 3600 * Gram, Moisture: 9}.Compute()
	if err != nil {
		t.Fatal(err)
	}
	near(t, "B4 volume cm3", step(t, r, "hole volume = final - initial")/CubicCentimetre, 1830, 1e-6)
	near(t, "B4 wet", r.WetDensity/GramPerCubicCentimetre, 1.967, 0.001)
	near(t, "B4 dry", r.DryDensity/GramPerCubicCentimetre, 1.805, 0.001)
}

// B5 [pub] relations of ASTM D6938 sec. 1; numbers [formula].
func TestNuclearB5(t *testing.T) {
	reading := []NuclearReading{{WetDensity: pcf(130.0), WaterPerVolume: pcf(14.0)}}
	r, err := Nuclear{ProbeDepth: 8 * Inch, Readings: reading}.Compute()
	if err != nil {
		t.Fatal(err)
	}
	near(t, "B5 dry", toPcf(r.DryDensity), 116.0, 0.05)
	near(t, "B5 w", r.Moisture, 12.07, 0.005)
	if r.MoistureCorrected {
		t.Error("B5 uncorrected reading reported as corrected")
	}
	c, err := DeriveCorrection(Offset, []MoisturePair{{Gauge: r.GaugeMoisture, Oven: 13.5}})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "B5 offset", c.Value, 1.4, 0.05)
	oven := 13.5
	r2, err := Nuclear{ProbeDepth: 8 * Inch, Readings: reading, OvenMoisture: &oven}.Compute()
	if err != nil {
		t.Fatal(err)
	}
	near(t, "B5 corrected dry (oven)", toPcf(r2.DryDensity), 114.5, 0.05)
	r3, err := Nuclear{ProbeDepth: 8 * Inch, Readings: reading, Correction: &c}.Compute()
	if err != nil {
		t.Fatal(err)
	}
	near(t, "B5 corrected dry (offset)", toPcf(r3.DryDensity), 114.5, 0.05)
	if !r3.MoistureCorrected {
		t.Error("B5 corrected reading reported as uncorrected")
	}
	f, err := DeriveCorrection(Factor, []MoisturePair{{Gauge: 10, Oven: 11}, {Gauge: 20, Oven: 21}})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "ratio correction", f.Value, (1.1+1.05)/2, 1e-12)
}

func TestNuclearTwoReadings(t *testing.T) {
	two := []NuclearReading{{pcf(130.0), pcf(14.0)}, {pcf(131.0), pcf(14.2)}}
	r, err := Nuclear{ProbeDepth: 6 * Inch, Readings: two}.Compute()
	if err != nil {
		t.Fatal(err)
	}
	near(t, "mean wet", toPcf(r.WetDensity), 130.5, 1e-9)
	far := []NuclearReading{{pcf(130.0), pcf(14.0)}, {pcf(133.0), pcf(14.0)}}
	if _, err := (Nuclear{ProbeDepth: 6 * Inch, Readings: far}).Compute(); !errors.Is(err, valid.ErrInput) {
		t.Errorf("3 pcf apart: error = %v, want refusal", err)
	}
	if _, err := (Nuclear{ProbeDepth: 6 * Inch, Readings: far, Agreement: pcf(4)}).Compute(); err != nil {
		t.Errorf("3 pcf apart with a 4 pcf tolerance: %v", err)
	}
	// Direct transmission is at most 300 mm / 12 in (ASTM D6938 sec. 1.2, [pub]).
	if _, err := (Nuclear{ProbeDepth: 14 * Inch, Readings: two[:1]}).Compute(); !errors.Is(err, valid.ErrInput) {
		t.Errorf("14 in probe: error = %v, want refusal", err)
	}
	if _, err := (Nuclear{ProbeDepth: 12 * Inch, Readings: two[:1]}).Compute(); err != nil {
		t.Errorf("12 in probe refused: %v", err)
	}
	bs, err := Nuclear{Backscatter: true, Readings: two[:1]}.Compute()
	if err != nil || bs.Method != NuclearBackscatter {
		t.Errorf("backscatter = %v, %v", bs.Method, err)
	}
}

// D2 [pub]: AASHTO T 224 example (a state DOT's published copy).
// D3 [formula]: AASHTO T 224 / ASTM D4718.
func TestOversizeD2D3(t *testing.T) {
	_, omc, err := CorrectForOversize(pcf(120), 12.0, Oversize{Percent: 15, BulkGs: 2.65, Moisture: 2.0}, Water624)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "D2 combined optimum", omc, 10.5, 0.05)

	o := Oversize{Percent: 20, BulkGs: 2.65, Moisture: 2.0}
	near(t, "D3 k pcf", toPcf(o.BulkGs*Water624), 165.36, 1e-9)
	mdd, omc, err := CorrectForOversize(pcf(120.0), 14.0, o, Water624)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "D3 corrected MDD", toPcf(mdd), 126.97, 0.005)
	if roundTo(toPcf(mdd), 1) != 127.0 {
		t.Errorf("D3 reported MDD = %v, want 127.0", roundTo(toPcf(mdd), 1))
	}
	near(t, "D3 corrected OMC", omc, 11.6, 0.05)
	fine, err := FineFraction(mdd, o, Water624)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "D3 inverse", toPcf(fine), 120.0, 1e-9)
}

// Method scope: D698-12 allows 25 / 25 / 30 % oversize for A / B / C, and the
// 2000 edition 20 % ([pub] per CHECKS); moulds 4 / 4 / 6 in, 25 / 25 / 56 blows.
func TestMethodScope(t *testing.T) {
	for _, c := range []struct {
		p     Procedure
		mould string
		blows int
		max   float64
	}{
		{Procedure{ASTMD698, "A", 2012}, "4 in (101.6 mm)", 25, 25},
		{Procedure{ASTMD698, "B", 2012}, "4 in (101.6 mm)", 25, 25},
		{Procedure{ASTMD698, "C", 2012}, "6 in (152.4 mm)", 56, 30},
		{Procedure{ASTMD698, "A", 2000}, "4 in (101.6 mm)", 25, 20},
		{Procedure{AASHTOT180, "D", 2017}, "6 in (152.4 mm)", 56, 30},
	} {
		sc, err := c.p.Scope()
		if err != nil {
			t.Fatal(err)
		}
		if sc.Mould != c.mould || sc.Blows != c.blows || sc.MaxOversize != c.max {
			t.Errorf("%v scope = %+v, want mould %s, %d blows, %v %%", c.p, sc, c.mould, c.blows, c.max)
		}
	}
	if _, err := (Procedure{ASTMD698, "D", 2012}).Scope(); !errors.Is(err, valid.ErrInput) {
		t.Errorf("D698 method D: error = %v, want refusal", err)
	}
	if ok, _ := (Procedure{ASTMD698, "A", 2012}).InScope(26); ok {
		t.Error("26 % oversize in scope of D698 A")
	}
}

// curveFrom samples a parabola with its peak at (wopt, mdd).
func curveFrom(wopt, mdd, curvature float64, ws ...float64) []CurvePoint {
	var pts []CurvePoint
	for _, w := range ws {
		pts = append(pts, CurvePoint{w, mdd - curvature*(w-wopt)*(w-wopt)})
	}
	return pts
}

func TestFitCurve(t *testing.T) {
	// Points on an exact parabola give back its vertex [formula].
	pts := curveFrom(13.5, pcf(116.0), pcf(0.4), 9, 11, 13, 15, 17)
	f, err := FitCurve(Curve{Procedure: Procedure{ASTMD698, "A", 2012}, Points: pts})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "fitted optimum", f.OptimumMoisture, 13.5, 1e-9)
	near(t, "fitted MDD", toPcf(f.MaxDryDensity), 116.0, 1e-9)
	if !f.Bracketed {
		t.Error("bracketed curve reported unbracketed")
	}
	// A fitted peak differs from the highest point: 13 % is the highest
	// point, but the maximum lies at 13.5 %.
	if f.OptimumMoisture == 13 {
		t.Error("fit returned the highest point")
	}
	// Peak at the wettest point: not bracketed ([practice]).
	f, err = FitCurve(Curve{Points: curveFrom(17, pcf(116.0), pcf(0.4), 9, 11, 13, 15, 16.5)})
	if err != nil {
		t.Fatal(err)
	}
	if f.Bracketed {
		t.Error("curve rising to its last point reported bracketed")
	}
	// Points above ZAV found when Gs is given.
	f, err = FitCurve(Curve{Points: []CurvePoint{{10, pcf(118)}, {13, pcf(122)}, {16, pcf(121)}}, Gs: 2.65, Water: Water624})
	if err != nil {
		t.Fatal(err)
	}
	if len(f.AboveZAV) != 1 || f.AboveZAV[0] != 2 {
		t.Errorf("AboveZAV = %v, want [2] (121 pcf at 16 %% is above ZAV 116.1)", f.AboveZAV)
	}
	for _, bad := range [][]CurvePoint{
		{{10, 1800}, {12, 1850}},
		{{10, 1900}, {12, 1850}, {14, 1900}},
		{{10, 1800}, {10, 1850}, {14, 1900}},
		{{10, 1800}, {12, math.NaN()}, {14, 1900}},
	} {
		if _, err := FitCurve(Curve{Points: bad}); !errors.Is(err, valid.ErrInput) {
			t.Errorf("FitCurve(%v) error = %v, want ErrInput", bad, err)
		}
	}
}

func family() Family {
	mk := func(name string, wopt, mdd float64) FamilyCurve {
		return FamilyCurve{Name: name, MaxDryDensity: pcf(mdd), OptimumMoisture: wopt,
			Points: curveFrom(wopt, pcf(mdd), pcf(0.5), wopt-4, wopt-2, wopt, wopt+2, wopt+4)}
	}
	return Family{Name: "test family", Procedure: Procedure{AASHTOT99, "A", 2017},
		Curves: []FamilyCurve{mk("1", 18, 105), mk("2", 15, 112), mk("3", 12, 120)}}
}

// One-point checks must lie at 80-100 % of optimum ([pub] WAQTC FOP for
// AASHTO T 272); a family needs at least three curves ([pub] AASHTO R 75 sec. 4).
func TestOnePoint(t *testing.T) {
	f := family()
	// On curve 2 at 13 %: 112 - 0.5 * 4 = 110 pcf; 13 / 15 = 87 % of optimum.
	r, err := f.OnePoint(13, pcf(110))
	if err != nil {
		t.Fatal(err)
	}
	near(t, "on-curve MDD", toPcf(r.MaxDryDensity), 112, 1e-6)
	near(t, "on-curve OMC", r.OptimumMoisture, 15, 1e-6)
	// Halfway between curves 2 and 3 at 12.5 %.
	d2 := 112 - 0.5*2.5*2.5
	d3 := 120 - 0.5*0.5*0.5
	r, err = f.OnePoint(12.5, pcf((d2+d3)/2))
	if err != nil {
		t.Fatal(err)
	}
	near(t, "interpolated MDD", toPcf(r.MaxDryDensity), 116, 1e-6)
	near(t, "interpolated OMC", r.OptimumMoisture, 13.5, 1e-6)
	if r.Below != "2" || r.Above != "3" {
		t.Errorf("between %q and %q, want 2 and 3", r.Below, r.Above)
	}
	// Wetter than optimum: refused.
	if _, err := f.OnePoint(16, pcf(112-0.5)); !errors.Is(err, valid.ErrInput) {
		t.Errorf("107 %% of optimum: error = %v, want refusal", err)
	}
	// Too dry: 11 % on curve 2 is 73 % of optimum.
	if _, err := f.OnePoint(11, pcf(112-0.5*16)); !errors.Is(err, valid.ErrInput) {
		t.Errorf("73 %% of optimum: error = %v, want refusal", err)
	}
	// Outside the family.
	if _, err := f.OnePoint(13, pcf(130)); !errors.Is(err, valid.ErrInput) {
		t.Errorf("above the family: error = %v, want refusal", err)
	}
	f.Curves = f.Curves[:2]
	if _, err := f.OnePoint(13, pcf(110)); !errors.Is(err, valid.ErrInput) {
		t.Errorf("two-curve family: error = %v, want refusal", err)
	}
}

func TestBadInputNamesField(t *testing.T) {
	for _, c := range []struct {
		name  string
		err   error
		field string
	}{
		{"negative mass", func() error { _, err := DriveCylinder{0.1, 0.1, -1, 10}.Compute(); return err }(), "soil_mass"},
		{"final above initial", func() error {
			_, err := OvenDry{Tare: 0.05, WetWithTare: 0.2, DryWithTare: 0.25}.Compute()
			return err
		}(), "dry_with_tare"},
		{"NaN", func() error { _, err := DryDensity(math.NaN(), 10); return err }(), "wet_density"},
		{"infinite", func() error { _, err := DryDensity(math.Inf(1), 10); return err }(), "wet_density"},
		{"moisture over 100", func() error { _, err := DryDensity(2000, 120); return err }(), "moisture"},
		{"negative moisture", func() error { _, err := DryDensity(2000, -1); return err }(), "moisture"},
		{"Gs low", func() error { _, err := ZeroAirVoids(1.9, 10, 1000); return err }(), "gs"},
		{"Gs high", func() error { _, err := ZeroAirVoids(3.6, 10, 1000); return err }(), "gs"},
		{"zero volume", func() error { _, err := RubberBalloon{1000e-6, 1000e-6, 2, 10}.Compute(); return err }(), "final_reading"},
		{"zero sand", func() error { _, err := SandCone{SandDensity: 1450, SoilMass: 3, Moisture: 10}.Compute(); return err }(), "sand_used"},
		{"cone over sand used", func() error {
			_, err := SandCone{SandDensity: 1450, SandUsed: 1, ConeCorrection: 1.5, SoilMass: 3, Moisture: 10}.Compute()
			return err
		}(), "cone_correction"},
	} {
		t.Run(c.name, func(t *testing.T) {
			var fe *valid.FieldError
			if !errors.As(c.err, &fe) {
				t.Fatalf("error = %v, want a *valid.FieldError", c.err)
			}
			if fe.Field != c.field {
				t.Errorf("field = %q, want %q (%v)", fe.Field, c.field, c.err)
			}
			if fe.Rule == "" {
				t.Error("empty rule")
			}
		})
	}
}

// Report MDD to 0.1 pcf and optimum to 0.1 % ([pub] ASTM D698); AASHTO
// T 99 / T 180 have methods A-D ([pub] T 99-17).
func TestReportingAndAASHTOMethods(t *testing.T) {
	if US.Places(Density) != 1 || US.Places(Percent) != 1 {
		t.Errorf("US places: density %d, percent %d; want 1 and 1", US.Places(Density), US.Places(Percent))
	}
	for _, s := range []Standard{AASHTOT99, AASHTOT180} {
		for _, m := range []string{"A", "B", "C", "D"} {
			if _, err := (Procedure{Standard: s, Method: m}).Scope(); err != nil {
				t.Errorf("%s method %s: %v", s, m, err)
			}
		}
		if _, err := (Procedure{Standard: s, Method: "E"}).Scope(); err == nil {
			t.Errorf("%s method E accepted", s)
		}
	}
}
