// Package earthwork reconciles earthwork quantities: the compacted volume
// placed in the fill, the bank volume it took from borrow and the loose
// volume hauled, related through dry density (the dry mass of soil is the
// same in each state), with shrinkage and swell.
//
// The trade defines shrinkage two ways. Relative to bank volume,
// shrinkage = (V_bank - V_compacted) / V_bank and the shrink factor
// V_compacted / V_bank = 1 - shrinkage. Relative to compacted volume (the
// FHWA Federal Lands Project Development and Design Manual, sec. 9.4),
// shrinkage = (V_bank - V_compacted) / V_compacted and the shrink factor
// = 1 / (1 + shrinkage): 25 % shrink gives 0.80, not 0.75. Swell is
// (V_loose - V_bank) / V_bank either way, and the swell factor 1 + swell.
// A project chooses its [Convention]; tamp stores densities and volumes,
// never a factor alone, and writes each definition out beside its figure.
package earthwork

import (
	"fmt"

	"tamp/internal/valid"
)

// Convention is how a project defines shrinkage.
type Convention int

const (
	// BankBasis: shrinkage = (V_bank - V_compacted) / V_bank.
	BankBasis Convention = iota
	// CompactedBasis: shrinkage = (V_bank - V_compacted) / V_compacted
	// (FHWA Federal Lands PDDM sec. 9.4).
	CompactedBasis
)

// Definition writes out what shrinkage means under c.
func (c Convention) Definition() string {
	if c == CompactedBasis {
		return "shrinkage = (bank volume - compacted volume) / compacted volume; shrink factor = 1 / (1 + shrinkage)"
	}
	return "shrinkage = (bank volume - compacted volume) / bank volume; shrink factor = 1 - shrinkage = compacted / bank"
}

// SwellDefinition writes out what swell means.
const SwellDefinition = "swell = (loose volume - bank volume) / bank volume; swell factor = 1 + swell = loose / bank"

// ShrinkFactor returns compacted / bank volume for a shrinkage percent under c.
func ShrinkFactor(shrinkPercent float64, c Convention) (float64, error) {
	if err := valid.Range("shrinkage_percent", shrinkPercent, 0, 99, " %"); err != nil {
		return 0, fmt.Errorf("earthwork: %w", err)
	}
	if c == CompactedBasis {
		return 1 / (1 + shrinkPercent/100), nil
	}
	return 1 - shrinkPercent/100, nil
}

// SwellFactor returns loose / bank volume for a swell percent.
func SwellFactor(swellPercent float64) (float64, error) {
	if err := valid.Range("swell_percent", swellPercent, 0, 500, " %"); err != nil {
		return 0, fmt.Errorf("earthwork: %w", err)
	}
	return 1 + swellPercent/100, nil
}

// Placement is compacted fill with the dry densities of its material in
// each state. LooseDryDensity is optional (zero: no loose volume computed).
type Placement struct {
	CompactedVolume     float64 // m3 placed in the fill
	CompactedDryDensity float64 // kg/m3 in the fill (e.g. 95 % of the reference)
	BankDryDensity      float64 // kg/m3 in place at the borrow source
	LooseDryDensity     float64 // kg/m3 in the hauling units
	Convention          Convention
}

// Balance is the reconciliation of a placement.
type Balance struct {
	DryMass          float64 // kg of dry soil placed
	BankVolume       float64 // m3 of borrow consumed
	LooseVolume      float64 // m3 hauled (zero without a loose density)
	ShrinkagePercent float64 // under the placement's convention
	ShrinkFactor     float64 // compacted / bank
	SwellPercent     float64 // zero without a loose density
	SwellFactor      float64 // loose / bank
	ShrinkDefinition string
	SwellDefinition  string
}

// Reconcile balances the dry mass placed against the borrow consumed and the
// loose volume hauled: V_bank = V_compacted rho_compacted / rho_bank, and
// likewise for loose.
func Reconcile(p Placement) (Balance, error) {
	if err := valid.First(valid.NonNegative("compacted_volume", p.CompactedVolume),
		valid.Positive("compacted_dry_density", p.CompactedDryDensity), valid.Positive("bank_dry_density", p.BankDryDensity),
		valid.NonNegative("loose_dry_density", p.LooseDryDensity)); err != nil {
		return Balance{}, fmt.Errorf("earthwork: reconcile: %w", err)
	}
	if p.LooseDryDensity > p.BankDryDensity {
		return Balance{}, fmt.Errorf("earthwork: reconcile: %w", valid.Fail("loose_dry_density", p.LooseDryDensity, "must not exceed bank_dry_density (loose soil is less dense than in the bank)"))
	}
	b := Balance{DryMass: p.CompactedVolume * p.CompactedDryDensity, ShrinkDefinition: p.Convention.Definition()}
	b.BankVolume = b.DryMass / p.BankDryDensity
	b.ShrinkFactor = p.BankDryDensity / p.CompactedDryDensity
	if p.Convention == CompactedBasis {
		b.ShrinkagePercent = 100 * (p.CompactedDryDensity/p.BankDryDensity - 1)
	} else {
		b.ShrinkagePercent = 100 * (1 - p.BankDryDensity/p.CompactedDryDensity)
	}
	if p.LooseDryDensity > 0 {
		b.LooseVolume = b.DryMass / p.LooseDryDensity
		b.SwellFactor = p.BankDryDensity / p.LooseDryDensity
		b.SwellPercent = 100 * (b.SwellFactor - 1)
		b.SwellDefinition = SwellDefinition
	}
	return b, nil
}

// State is a condition of earth: in the bank, loose in a hauling unit, or
// compacted in the fill.
type State int

// The states of earth.
const (
	Bank State = iota
	Loose
	Compacted
)

// Factors are a material's volumes per unit of bank volume, as a table of
// soil conversion factors gives them (e.g. 1.11 loose and 0.95 compacted).
type Factors struct {
	Loose     float64
	Compacted float64
}

func (f Factors) of(s State) float64 {
	switch s {
	case Loose:
		return f.Loose
	case Compacted:
		return f.Compacted
	}
	return 1
}

// Convert converts volume v of a material from one state to another.
func (f Factors) Convert(v float64, from, to State) (float64, error) {
	if err := valid.First(valid.NonNegative("volume", v), valid.Positive("loose_factor", f.Loose), valid.Positive("compacted_factor", f.Compacted)); err != nil {
		return 0, fmt.Errorf("earthwork: convert: %w", err)
	}
	return v / f.of(from) * f.of(to), nil
}
