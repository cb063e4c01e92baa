package earthwork

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

// F2 [formula]: dry-mass balance.
func TestReconcileF2(t *testing.T) {
	pcf := soil.PoundPerCubicFoot
	b, err := Reconcile(Placement{
		CompactedVolume: 10000 * soil.CubicYard, CompactedDryDensity: 0.95 * 118.0 * pcf,
		BankDryDensity: 101.5 * pcf, LooseDryDensity: 84.0 * pcf,
	})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "F2 bank yd3", b.BankVolume/soil.CubicYard, 11044.3, 0.1)
	near(t, "F2 loose yd3", b.LooseVolume/soil.CubicYard, 13345.2, 0.1)
	near(t, "F2 shrinkage %", b.ShrinkagePercent, 9.46, 0.01)
	near(t, "F2 swell %", b.SwellPercent, 20.83, 0.01)
	near(t, "shrink factor = compacted / bank", b.ShrinkFactor, 10000/11044.3, 1e-5)
	if b.ShrinkDefinition == "" || b.SwellDefinition == "" {
		t.Error("definitions missing")
	}
	// The same placement under the compacted-volume convention.
	c, _ := Reconcile(Placement{CompactedVolume: 10000 * soil.CubicYard, CompactedDryDensity: 0.95 * 118.0 * pcf,
		BankDryDensity: 101.5 * pcf, Convention: CompactedBasis})
	near(t, "compacted-basis shrinkage %", c.ShrinkagePercent, 100*(11044.3-10000)/10000, 0.01)
	if c.LooseVolume != 0 || c.SwellDefinition != "" {
		t.Errorf("no loose density: loose %v, swell definition %q", c.LooseVolume, c.SwellDefinition)
	}
}

// F3 [pub]: the factor convention of the FHWA Federal Lands Project
// Development and Design Manual sec. 9.4.
func TestFactorsF3(t *testing.T) {
	f, err := ShrinkFactor(25, CompactedBasis)
	if err != nil || f != 0.80 {
		t.Errorf("F3 FHWA shrink factor = %v, %v; want 0.80", f, err)
	}
	f, _ = ShrinkFactor(25, BankBasis)
	if f != 0.75 {
		t.Errorf("F3 bank-basis shrink factor = %v, want 0.75", f)
	}
	s, _ := SwellFactor(25)
	if s != 1.25 {
		t.Errorf("F3 swell factor = %v, want 1.25", s)
	}
}

// F4 [pub]: US Navy construction training manual, soil conversion table:
// sand, 1 bank = 1.11 loose = 0.95 compacted.
func TestConvertF4(t *testing.T) {
	sand := Factors{Loose: 1.11, Compacted: 0.95}
	for _, c := range []struct {
		from, to State
		v, want  float64
	}{
		{Bank, Loose, 100, 111}, {Bank, Compacted, 100, 95}, {Loose, Bank, 111, 100}, {Compacted, Loose, 95, 111},
	} {
		got, err := sand.Convert(c.v, c.from, c.to)
		if err != nil {
			t.Fatal(err)
		}
		near(t, "F4 conversion", got, c.want, 1e-9)
	}
}

func TestBadInput(t *testing.T) {
	_, err := Reconcile(Placement{CompactedVolume: 100, CompactedDryDensity: 1800, BankDryDensity: 0})
	var fe *valid.FieldError
	if !errors.As(err, &fe) || fe.Field != "bank_dry_density" {
		t.Errorf("zero bank density: error = %v", err)
	}
	_, err = Reconcile(Placement{CompactedVolume: 100, CompactedDryDensity: 1800, BankDryDensity: 1600, LooseDryDensity: 1700})
	if !errors.As(err, &fe) || fe.Field != "loose_dry_density" {
		t.Errorf("loose denser than bank: error = %v", err)
	}
	if _, err := ShrinkFactor(math.NaN(), BankBasis); !errors.Is(err, valid.ErrInput) {
		t.Errorf("NaN shrinkage: error = %v", err)
	}
}
