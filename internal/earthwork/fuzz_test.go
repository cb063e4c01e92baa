package earthwork

import (
	"errors"
	"math"
	"testing"

	"tamp/internal/valid"
)

func FuzzReconcile(f *testing.F) {
	f.Add(7645.5, 1795.7, 1625.9, 1345.6, false)
	f.Add(-1.0, math.NaN(), 0.0, math.Inf(1), true)
	f.Fuzz(func(t *testing.T, v, comp, bank, loose float64, fhwa bool) {
		p := Placement{CompactedVolume: v, CompactedDryDensity: comp, BankDryDensity: bank, LooseDryDensity: loose}
		if fhwa {
			p.Convention = CompactedBasis
		}
		b, err := Reconcile(p)
		if err != nil {
			if !errors.Is(err, valid.ErrInput) {
				t.Fatal(err)
			}
			return
		}
		if math.IsNaN(b.BankVolume) || b.BankVolume < 0 || math.IsNaN(b.ShrinkFactor) {
			t.Fatalf("balance %+v", b)
		}
		if loose > 0 && b.LooseVolume < b.BankVolume*(1-1e-12) && !math.IsInf(b.BankVolume, 0) {
			t.Fatalf("loose volume %v below bank %v", b.LooseVolume, b.BankVolume)
		}
	})
}

func FuzzFactors(f *testing.F) {
	f.Add(25.0, 25.0, 100.0, 1.11, 0.95)
	f.Add(math.NaN(), -1.0, math.Inf(1), 0.0, -1.0)
	f.Fuzz(func(t *testing.T, shrink, swell, v, loose, comp float64) {
		for _, c := range []Convention{BankBasis, CompactedBasis} {
			if sf, err := ShrinkFactor(shrink, c); err == nil && (sf <= 0 || sf > 1) {
				t.Fatalf("ShrinkFactor(%v) = %v", shrink, sf)
			} else if err != nil && !errors.Is(err, valid.ErrInput) {
				t.Fatal(err)
			}
		}
		if sw, err := SwellFactor(swell); err == nil && sw < 1 {
			t.Fatalf("SwellFactor(%v) = %v", swell, sw)
		} else if err != nil && !errors.Is(err, valid.ErrInput) {
			t.Fatal(err)
		}
		fs := Factors{Loose: loose, Compacted: comp}
		if out, err := fs.Convert(v, Bank, Loose); err == nil && (math.IsNaN(out) || out < 0) {
			t.Fatalf("Convert = %v", out)
		} else if err != nil && !errors.Is(err, valid.ErrInput) {
			t.Fatal(err)
		}
	})
}
