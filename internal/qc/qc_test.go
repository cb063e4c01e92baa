package qc

import (
	"errors"
	"math"
	"testing"

	"tamp/internal/soil"
	"tamp/internal/valid"
)

func near(t *testing.T, name string, got, want, tol float64) {
	t.Helper()
	if math.IsNaN(got) || math.Abs(got-want) > tol {
		t.Errorf("%s = %.6f, want %.6f (tol %g)", name, got, want, tol)
	}
}

func pcf(v float64) float64 { return v * soil.PoundPerCubicFoot }

func ptr(l Limit) *Limit { return &l }

func hasCode(fs []Finding, code string) bool {
	for _, f := range fs {
		if f.Code == code {
			return true
		}
	}
	return false
}

// C1 [pub]: the rule of AASHTO M 57 sec. 4.2.2; numbers [formula].
func TestGradeC1(t *testing.T) {
	r, err := Grade(Input{
		Test:      soil.InPlace{Method: soil.SandConeMethod, DryDensity: pcf(111.6), Moisture: 12.0},
		Reference: Reference{MaxDryDensity: pcf(116.0), OptimumMoisture: 13.5},
		Spec:      Spec{MinCompaction: ptr(MustLimit("95")), MoistureLow: ptr(MustLimit("-2")), MoistureHigh: ptr(MustLimit("+2"))},
	})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "C1 RC", r.RelativeCompaction, 96.2, 0.05)
	near(t, "C1 deviation", r.MoistureDeviation, -1.5, 1e-9)
	if r.Verdict != Pass || len(r.Reasons) != 0 {
		t.Errorf("C1 verdict = %v %v, want pass", r.Verdict, r.Reasons)
	}
}

// C2 [pub]: rounding to the limit's last place, AASHTO R 11 / ASTM E29.
func TestRoundingC2(t *testing.T) {
	for _, c := range []struct {
		limit string
		rc    float64
		pass  bool
	}{
		{"95", 94.6, true},
		{"95.0", 94.6, false},
		{"95", 94.4, false},
		{"95.0", 94.95, true},
		{"95.0", 94.94, false},
		// An exact five rounds to the even digit (E29; from memory): 94.5 -> 94.
		{"95", 94.5, false},
		{"95", 95.5, true},
	} {
		l := MustLimit(c.limit)
		if got := l.AtLeast(c.rc); got != c.pass {
			t.Errorf("C2 %v against %q: AtLeast = %v, want %v", c.rc, c.limit, got, c.pass)
		}
		r, err := Grade(Input{
			Test:      soil.InPlace{DryDensity: pcf(c.rc), Moisture: 10},
			Reference: Reference{MaxDryDensity: pcf(100), OptimumMoisture: 10},
			Spec:      Spec{MinCompaction: &l},
		})
		if err != nil {
			t.Fatal(err)
		}
		if got := r.Verdict == Pass; got != c.pass {
			t.Errorf("C2 grade %v against %q = %v %v", c.rc, c.limit, r.Verdict, r.Reasons)
		}
		if !c.pass && !hasCode(r.Reasons, CompactionBelowMinimum) {
			t.Errorf("C2 failing grade has no %s: %v", CompactionBelowMinimum, r.Reasons)
		}
	}
}

func TestParseLimit(t *testing.T) {
	for _, c := range []struct {
		in     string
		v      float64
		places int
	}{{"95", 95, 0}, {"95.0", 95, 1}, {"-2", -2, 0}, {"+1.5", 1.5, 1}, {" 90.00 ", 90, 2}} {
		l, err := ParseLimit("min_rc", c.in)
		if err != nil || l.Value != c.v || l.Places != c.places {
			t.Errorf("ParseLimit(%q) = %+v, %v; want %v with %d places", c.in, l, err, c.v, c.places)
		}
	}
	for _, bad := range []string{"", "abc", "NaN", "Inf", "1e2", "0x10", "9_5"} {
		_, err := ParseLimit("min_rc", bad)
		var fe *valid.FieldError
		if !errors.As(err, &fe) || fe.Field != "min_rc" {
			t.Errorf("ParseLimit(%q) error = %v, want a min_rc field error", bad, err)
		}
	}
}

func TestMoistureWindow(t *testing.T) {
	ref := Reference{MaxDryDensity: pcf(116), OptimumMoisture: 13.5}
	spec := Spec{MoistureLow: ptr(MustLimit("-2")), MoistureHigh: ptr(MustLimit("2"))}
	for _, c := range []struct {
		w    float64
		code string
	}{
		{10.9, MoistureBelowWindow}, {11.4, ""}, {15.9, ""}, {16.1, MoistureAboveWindow},
		// -2.5 and +2.5 points round to -2 and +2 (the exact-five rule of E29) and conform.
		{11.0, ""}, {16.0, ""},
	} {
		r, err := Grade(Input{Test: soil.InPlace{DryDensity: pcf(112), Moisture: c.w}, Reference: ref, Spec: spec})
		if err != nil {
			t.Fatal(err)
		}
		if c.code == "" && r.Verdict != Pass || c.code != "" && !hasCode(r.Reasons, c.code) {
			t.Errorf("w %v: verdict %v reasons %v, want %q", c.w, r.Verdict, r.Reasons, c.code)
		}
	}
	// Percent of optimum: 90-110 % of 13.5 is 12.15-14.85 %; only an upper bound here.
	pct := Spec{MoistureBasis: PercentOfOptimum, MoistureHigh: ptr(MustLimit("110"))}
	r, _ := Grade(Input{Test: soil.InPlace{DryDensity: pcf(112), Moisture: 15.0}, Reference: ref, Spec: pct})
	if !hasCode(r.Reasons, MoistureAboveWindow) {
		t.Errorf("15.0 %% is 111 %% of optimum: reasons %v", r.Reasons)
	}
	r, _ = Grade(Input{Test: soil.InPlace{DryDensity: pcf(112), Moisture: 5.0}, Reference: ref, Spec: pct})
	if r.Verdict != Pass {
		t.Errorf("no lower bound: %v", r.Reasons)
	}
}

func TestFlags(t *testing.T) {
	procA := soil.Procedure{Standard: soil.ASTMD698, Method: "A", Edition: 2012}
	base := func() Input {
		return Input{
			Test:      soil.InPlace{Method: soil.SandConeMethod, DryDensity: pcf(112), Moisture: 13},
			Reference: Reference{MaxDryDensity: pcf(116), OptimumMoisture: 13.5, Procedure: &procA},
			Spec:      Spec{MinCompaction: ptr(MustLimit("95"))},
		}
	}
	for _, c := range []struct {
		name string
		edit func(*Input)
		flag string
	}{
		{"above ZAV (A5)", func(in *Input) {
			in.Test.DryDensity, in.Test.Moisture = pcf(125), 13
			in.Reference.MaxDryDensity = pcf(125)
			in.Gs, in.Water = 2.65, soil.Water624
		}, AboveZeroAirVoids},
		{"saturation over 100 (A5)", func(in *Input) {
			in.Test.DryDensity, in.Test.Moisture = pcf(125), 13
			in.Reference.MaxDryDensity = pcf(125)
			in.Gs, in.Water = 2.65, soil.Water624
		}, SaturationOver100},
		{"suspect high", func(in *Input) { in.Test.DryDensity = pcf(123) }, CompactionSuspectHigh},
		{"suspect high, own threshold", func(in *Input) { in.Test.DryDensity = pcf(118.5); in.Spec.SuspectCompaction = 102 }, CompactionSuspectHigh},
		{"nuclear uncorrected", func(in *Input) { in.Test.Method = soil.NuclearDirect }, NuclearMoistureUncorrected},
		{"not bracketed", func(in *Input) { in.Reference.NotBracketed = true }, ReferenceNotBracketed},
		{"oversize outside scope", func(in *Input) {
			in.Oversize = &soil.Oversize{Percent: 28, BulkGs: 2.65, Moisture: 2}
			in.Water = soil.Water624
		}, OversizeOutsideScope},
		{"probe deeper than lift", func(in *Input) {
			in.Test.Method, in.Test.MoistureCorrected, in.Test.ProbeDepth = soil.NuclearDirect, true, 10*soil.Inch
			in.LiftThickness = 8 * soil.Inch
		}, ProbeDeeperThanLift},
	} {
		t.Run(c.name, func(t *testing.T) {
			clean, err := Grade(base())
			if err != nil {
				t.Fatal(err)
			}
			if hasCode(clean.Flags, c.flag) {
				t.Fatalf("base input already flagged %s", c.flag)
			}
			in := base()
			c.edit(&in)
			r, err := Grade(in)
			if err != nil {
				t.Fatal(err)
			}
			if !hasCode(r.Flags, c.flag) {
				t.Errorf("flags = %v, want %s", r.Flags, c.flag)
			}
		})
	}
}

// D3 through Grade: the corrected MDD of 127.0 pcf is what the test is
// compared with ([formula] AASHTO T 224 / ASTM D4718).
func TestGradeOversize(t *testing.T) {
	r, err := Grade(Input{
		Test:      soil.InPlace{DryDensity: pcf(121.0), Moisture: 11.0},
		Reference: Reference{MaxDryDensity: pcf(120.0), OptimumMoisture: 14.0},
		Oversize:  &soil.Oversize{Percent: 20, BulkGs: 2.65, Moisture: 2},
		Water:     soil.Water624,
		Spec:      Spec{MinCompaction: ptr(MustLimit("95"))},
	})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "corrected MDD", r.MaxDryDensity/soil.PoundPerCubicFoot, 126.97, 0.005)
	near(t, "corrected OMC", r.OptimumMoisture, 11.6, 0.05)
	near(t, "RC", r.RelativeCompaction, 100*121/126.966, 0.01)
}

// E1, E2 [pub]: FHWA Technical Advisory T 5080.12, table of PWL by Q.
func TestPWLTableE1E2(t *testing.T) {
	for _, c := range []struct {
		n    int
		q    float64
		want float64
	}{
		{3, 0.76, 73}, {4, 0.69, 73}, {5, 0.66, 73}, {6, 0.65, 73}, {7, 0.64, 73}, {8, 0.63, 73},
		{3, 0.36, 60}, {4, 0.30, 60}, {5, 0.28, 60}, {10, 0.26, 60},
	} {
		near(t, "PWL table", PWLFromQuality(c.n, c.q), c.want, 0.5)
	}
}

// E6 [formula]: closed forms. For n = 4, b = 1 and I_x(1, 1) = x, so
// PWL = 50 + 100 Q / 3. For n = 3, b = 1/2 and I_x(1/2, 1/2) = (2/pi) asin(sqrt x),
// a second check of gonum's incomplete beta beside the table.
func TestPWLClosedFormsE6(t *testing.T) {
	near(t, "E6 n=4 Q=1", PWLFromQuality(4, 1.0), 83.33, 0.01)
	near(t, "E6 n=3 Q=1", PWLFromQuality(3, 1.0), 83.33, 0.01)
	near(t, "E6 n=5 Q=1.79", PWLFromQuality(5, 1.79), 100, 0.01)
	for _, q := range []float64{-1, -0.3, 0, 0.4, 0.9} {
		near(t, "n=4 closed form", PWLFromQuality(4, q), 50+100*q/3, 1e-9)
		x := 0.5 + q*math.Sqrt(3)/4
		near(t, "n=3 closed form", PWLFromQuality(3, q), 100*2/math.Pi*math.Asin(math.Sqrt(x)), 1e-9)
	}
}

// E4 [formula]: one-sided lot.
func TestLotE4(t *testing.T) {
	lsl := 95.0
	lot, err := PercentWithinLimits([]float64{96.0, 97.5, 94.5, 98.0, 95.5}, &lsl, nil)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "E4 mean", lot.Mean, 96.3, 1e-9)
	near(t, "E4 s", lot.StdDev, 1.4405, 0.0001)
	near(t, "E4 Q_L", lot.QualityLower, 0.9025, 0.0001)
	near(t, "E4 PWL", lot.PWL, 80.70, 0.05)
	if !math.IsNaN(lot.QualityUpper) {
		t.Errorf("E4 Q_U = %v, want NaN (no upper limit)", lot.QualityUpper)
	}
}

// E5 [formula]: two-sided lot.
func TestLotE5(t *testing.T) {
	lo, hi := -2.0, 2.0
	lot, err := PercentWithinLimits([]float64{-1.2, 0.4, 1.5, -0.3, 2.4}, &lo, &hi)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "E5 Q_U", lot.QualityUpper, 1.010, 0.0005)
	near(t, "E5 Q_L", lot.QualityLower, 1.795, 0.0005)
	near(t, "E5 PWL", lot.PWL, 83.93, 0.05)
}

func TestLotBadInput(t *testing.T) {
	lo, hi := 95.0, 90.0
	for _, c := range []struct {
		name   string
		values []float64
		lo, hi *float64
		field  string
	}{
		{"too few", []float64{1, 2}, &lo, nil, "values"},
		{"no limit", []float64{1, 2, 3}, nil, nil, "lower"},
		{"NaN value", []float64{1, math.NaN(), 3}, &lo, nil, "values[1]"},
		{"upper below lower", []float64{1, 2, 3}, &lo, &hi, "upper"},
	} {
		_, err := PercentWithinLimits(c.values, c.lo, c.hi)
		var fe *valid.FieldError
		if !errors.As(err, &fe) || fe.Field != c.field {
			t.Errorf("%s: error = %v, want a %s field error", c.name, err, c.field)
		}
	}
	same := 96.0
	lot, err := PercentWithinLimits([]float64{96, 96, 96}, &lo, &same)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "zero spread PWL_L", lot.PWLLower, 100, 1e-9)
	near(t, "zero spread PWL_U (mean on the limit)", lot.PWLUpper, 50, 1e-9)
}

// A test whose reference has not arrived is pending, with its flags.
func TestGradePending(t *testing.T) {
	r, err := Grade(Input{Test: soil.InPlace{Method: soil.NuclearDirect, DryDensity: pcf(125), Moisture: 13},
		Gs: 2.65, Water: soil.Water624, Spec: Spec{MinCompaction: ptr(MustLimit("95"))}})
	if err != nil {
		t.Fatal(err)
	}
	if r.Verdict != Pending || r.RelativeCompaction != 0 || len(r.Reasons) != 0 {
		t.Errorf("no reference: verdict %v RC %v reasons %v, want pending", r.Verdict, r.RelativeCompaction, r.Reasons)
	}
	if !hasCode(r.Flags, AboveZeroAirVoids) || !hasCode(r.Flags, NuclearMoistureUncorrected) {
		t.Errorf("pending test lost its flags: %v", r.Flags)
	}
}
