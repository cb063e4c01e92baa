package report

import (
	"tamp/internal/earthwork"
	"tamp/internal/ledger"
)

// Balance is the reconciliation of one borrow source.
type Balance struct {
	Source          *ledger.BorrowSource
	CompactedVolume float64 // m3 placed from the source
	FillDryDensity  float64 // kg/m3, mean of the graded original tests on those placements
	BankVolume      float64 // m3 of borrow consumed, by dry mass
	LooseHauled     float64 // m3 loose hauled, from the haul records
	LooseExpected   float64 // m3 loose the dry mass implies (zero without a loose density)
	Balance         earthwork.Balance
	Tests           int // tests the fill density comes from
}

// Reconcile balances, for each borrow source, the compacted volume placed
// from it with the bank volume consumed and the loose volume hauled,
// through dry mass. A source without graded tests on its placements, or
// without a bank density, gets no bank volume.
func Reconcile(p *ledger.Projection) ([]Balance, error) {
	snap := p.Snapshot()
	conv := earthwork.BankBasis
	if su := p.SetUp(); su != nil {
		conv = su.Shrinkage
	}
	var out []Balance
	for _, src := range snap.BorrowSource {
		b := Balance{Source: src}
		placed := map[string]bool{}
		for _, pl := range snap.Placements {
			if pl.BorrowSourceID == src.ID {
				b.CompactedVolume += pl.CompactedVolume
				placed[pl.ID] = true
			}
		}
		var sum float64
		for _, t := range snap.Tests {
			if placed[t.Content.PlacementID] && !t.Voided() && t.RetestOf == "" && t.Result.DryDensity > 0 {
				sum += t.Result.DryDensity
				b.Tests++
			}
		}
		for _, h := range snap.Hauls {
			if h.BorrowSourceID == src.ID {
				b.LooseHauled += float64(h.Loads) * h.LooseVolumePerLoad
			}
		}
		if b.Tests > 0 && src.BankDryDensity > 0 {
			b.FillDryDensity = sum / float64(b.Tests)
			bal, err := earthwork.Reconcile(earthwork.Placement{CompactedVolume: b.CompactedVolume, CompactedDryDensity: b.FillDryDensity,
				BankDryDensity: src.BankDryDensity, LooseDryDensity: src.LooseDryDensity, Convention: conv})
			if err != nil {
				return nil, err
			}
			b.Balance, b.BankVolume, b.LooseExpected = bal, bal.BankVolume, bal.LooseVolume
		}
		out = append(out, b)
	}
	return out, nil
}
