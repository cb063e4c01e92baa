package cli

import (
	"fmt"

	"github.com/spf13/cobra"

	"tamp/internal/earthwork"
	"tamp/internal/soil"
)

func newCalcVolume() *cobra.Command {
	var (
		units, convention          string
		compacted, cd, bank, loose float64
		asJSON                     bool
	)
	c := &cobra.Command{
		Use:   "volume",
		Short: "Reconcile a compacted volume with the bank volume it took and the loose volume hauled",
		Long: `Reconcile earthwork quantities through dry density: the dry mass placed in the
fill equals the dry mass taken from borrow and the dry mass hauled, so
bank volume = compacted volume x compacted dry density / bank dry density,
and likewise for loose volume.

Shrinkage is defined two ways in the trade; --convention chooses:
  bank       shrinkage = (bank - compacted) / bank; shrink factor = 1 - shrinkage
  compacted  shrinkage = (bank - compacted) / compacted; shrink factor = 1 / (1 + shrinkage)
             (the FHWA Federal Lands Project Development and Design Manual, sec. 9.4)
Swell = (loose - bank) / bank either way. Volumes are yd3 (us) or m3 (si),
densities pcf or kg/m3.`,
		Example: `  tamp calc volume --compacted-volume 10000 --compacted-dry-density 112.1 \
      --bank-dry-density 101.5 --loose-dry-density 84.0`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			sys, err := soil.ParseSystem(units)
			if err != nil {
				return inputError(cmd, err)
			}
			for _, name := range []string{"compacted-volume", "compacted-dry-density", "bank-dry-density"} {
				if !cmd.Flags().Changed(name) {
					return required(name, "is required")
				}
			}
			p := earthwork.Placement{
				CompactedVolume: sys.ToSI(soil.Volume, compacted), CompactedDryDensity: sys.ToSI(soil.Density, cd),
				BankDryDensity: sys.ToSI(soil.Density, bank), LooseDryDensity: sys.ToSI(soil.Density, loose),
			}
			switch convention {
			case "bank":
			case "compacted":
				p.Convention = earthwork.CompactedBasis
			default:
				return required("convention", fmt.Sprintf("must be bank or compacted, not %q", convention))
			}
			b, err := earthwork.Reconcile(p)
			if err != nil {
				return inputError(cmd, err)
			}
			vol := func(v float64) num { return some(sys.FromSI(soil.Volume, v), 1) }
			out := volumeOut{
				Units: sys.String(), Convention: convention, CompactedVolume: some(compacted, 1),
				BankVolume: vol(b.BankVolume), ShrinkagePercent: some(b.ShrinkagePercent, 2), ShrinkFactor: some(b.ShrinkFactor, 4),
				ShrinkageDefinition: b.ShrinkDefinition, DryMass: some(sys.FromSI(soil.Mass, b.DryMass)/unitTon(sys), 1),
				DryMassUnit: tonName(sys),
			}
			if loose > 0 {
				lv, sw, sf := vol(b.LooseVolume), some(b.SwellPercent, 2), some(b.SwellFactor, 4)
				out.LooseVolume, out.SwellPercent, out.SwellFactor, out.SwellDefinition = &lv, &sw, &sf, b.SwellDefinition
			}
			if asJSON {
				return writeJSON(cmd.OutOrStdout(), out)
			}
			return out.text(cmd, sys)
		},
	}
	fl := c.Flags()
	fl.StringVar(&units, "units", "us", "unit system: us (yd3, pcf) or si (m3, kg/m3)")
	fl.Float64Var(&compacted, "compacted-volume", 0, "compacted volume placed in the fill, yd3 or m3")
	fl.Float64Var(&cd, "compacted-dry-density", 0, "dry density in the fill, pcf or kg/m3")
	fl.Float64Var(&bank, "bank-dry-density", 0, "dry density in place at the borrow source, pcf or kg/m3")
	fl.Float64Var(&loose, "loose-dry-density", 0, "dry density loose in the hauling units, pcf or kg/m3 (optional)")
	fl.StringVar(&convention, "convention", "bank", "shrinkage definition: bank or compacted")
	fl.BoolVar(&asJSON, "json", false, "print one JSON object")
	_ = c.RegisterFlagCompletionFunc("convention", cobra.FixedCompletions([]string{"bank", "compacted"}, cobra.ShellCompDirectiveNoFileComp))
	_ = c.RegisterFlagCompletionFunc("units", cobra.FixedCompletions([]string{"us", "si"}, cobra.ShellCompDirectiveNoFileComp))
	return c
}

// unitTon is the mass unit dry mass is shown in: short tons (2000 lb) or tonnes.
func unitTon(s soil.System) float64 {
	if s == soil.US {
		return 2000
	}
	return 1e6 // grams in a tonne
}

func tonName(s soil.System) string {
	if s == soil.US {
		return "short ton"
	}
	return "t"
}

type volumeOut struct {
	Units               string `json:"units"`
	Convention          string `json:"convention"`
	CompactedVolume     num    `json:"compacted_volume"`
	DryMass             num    `json:"dry_mass"`
	DryMassUnit         string `json:"dry_mass_unit"`
	BankVolume          num    `json:"bank_volume"`
	LooseVolume         *num   `json:"loose_volume"`
	ShrinkagePercent    num    `json:"shrinkage_percent"`
	ShrinkFactor        num    `json:"shrink_factor"`
	ShrinkageDefinition string `json:"shrinkage_definition"`
	SwellPercent        *num   `json:"swell_percent"`
	SwellFactor         *num   `json:"swell_factor"`
	SwellDefinition     string `json:"swell_definition,omitempty"`
}

func (o volumeOut) text(cmd *cobra.Command, sys soil.System) error {
	p := &printer{w: cmd.OutOrStdout()}
	vu := sys.Unit(soil.Volume)
	p.f("Earthwork balance by dry mass\n")
	p.f("  %-28s %12s %s\n", "compacted volume", o.CompactedVolume, vu)
	p.f("  %-28s %12s %s\n", "dry mass placed", o.DryMass, o.DryMassUnit)
	p.f("  %-28s %12s %s\n", "bank volume from borrow", o.BankVolume, vu)
	if o.LooseVolume != nil {
		p.f("  %-28s %12s %s\n", "loose volume hauled", *o.LooseVolume, vu)
	}
	p.f("  %-28s %12s %%   (shrink factor %s)\n", "shrinkage", o.ShrinkagePercent, o.ShrinkFactor)
	p.f("    %s\n", o.ShrinkageDefinition)
	if o.SwellPercent != nil {
		p.f("  %-28s %12s %%   (swell factor %s)\n", "swell", *o.SwellPercent, *o.SwellFactor)
		p.f("    %s\n", o.SwellDefinition)
	}
	return p.err
}
