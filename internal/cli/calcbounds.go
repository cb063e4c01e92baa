package cli

import (
	"fmt"
	"strconv"
	"strings"

	"github.com/spf13/cobra"

	"tamp/internal/ledger"
	"tamp/internal/soil"
)

// The bounds tamp calc refuses values outside of are the ledger's (see
// internal/ledger/admit.go), so that a test calc computes is one a device
// can record: what no soil, apparatus or reading can be is refused with the
// flag, the value and the bound, never graded.

// calcBound is the range of one flag's value, SI.
type calcBound struct {
	flag   string
	q      soil.Quantity
	lo, hi float64
	why    string
}

const (
	calcDensityWhy = "no soil is looser than 500 kg/m3 or denser than its solids (specific gravity at most 3.5)"
	calcReadingWhy = "far above any field density test: a unit keyed wrong? (check --units)"
)

// calcReadingBounds are the bounds of calc test's readings as typed.
var calcReadingBounds = []calcBound{
	{"wet-density", soil.Density, ledger.MinDensity, ledger.MaxDensity, calcDensityWhy},
	{"water-per-volume", soil.Density, 0, ledger.MaxWaterPerVolume, "a volume of soil holds at most its own volume of water"},
	{"sand-density", soil.Density, ledger.MinSandDensity, ledger.MaxSandDensity, "a calibrated sand pours at about 1300 to 1700 kg/m3"},
	{"sand-used", soil.Mass, 0, ledger.MaxTestMass, calcReadingWhy},
	{"cone-correction", soil.Mass, 0, ledger.MaxTestMass, calcReadingWhy},
	{"soil-mass", soil.Mass, 0, ledger.MaxTestMass, calcReadingWhy},
	{"cylinder-diameter", soil.Depth, 0, ledger.MaxTestLength, calcReadingWhy},
	{"cylinder-length", soil.Depth, 0, ledger.MaxTestLength, calcReadingWhy},
	{"balloon-initial", soil.SmallVolume, 0, ledger.MaxTestVolume, calcReadingWhy},
	{"balloon-final", soil.SmallVolume, 0, ledger.MaxTestVolume, calcReadingWhy},
	{"mdd", soil.Density, ledger.MinDensity, ledger.MaxDensity, calcDensityWhy},
}

// checkCalcReadings refuses a reading given on cmd's flags that lies outside
// its bound. It runs before the arithmetic, so that a unit keyed wrong is
// named as such rather than by what it leads to; values that are not finite,
// zero or negative pass here and are refused by the arithmetic's own rules.
func checkCalcReadings(cmd *cobra.Command, sys soil.System) error {
	for _, b := range calcReadingBounds {
		f := cmd.Flags().Lookup(b.flag)
		if f == nil || !f.Changed {
			continue
		}
		v, err := strconv.ParseFloat(f.Value.String(), 64)
		if err != nil || !(v > 0) {
			continue
		}
		if si := sys.ToSI(b.q, v); si < b.lo || si > b.hi {
			return fmt.Errorf("--%s %s: %s is outside %s: %s", b.flag, f.Value.String(), calcShow(sys, b.q, si),
				calcRange(sys, b.q, b.lo, b.hi), b.why)
		}
	}
	return nil
}

// checkCalcWetDensity refuses a wet density computed from a test's readings
// that no soil can have, naming the readings it came from; soilMass is the
// moist soil's mass as typed (lb or g).
func checkCalcWetDensity(sys soil.System, t soil.InPlace, soilMass float64) error {
	if t.WetDensity >= ledger.MinDensity && t.WetDensity <= ledger.MaxDensity {
		return nil
	}
	from := map[soil.Method][]string{
		soil.SandConeMethod:      {"soil-mass", "sand-used", "cone-correction", "sand-density"},
		soil.DriveCylinderMethod: {"soil-mass", "cylinder-diameter", "cylinder-length"},
		soil.RubberBalloonMethod: {"soil-mass", "balloon-initial", "balloon-final"},
	}[t.Method]
	if from == nil { // a wet density typed as such is checked as typed
		return nil
	}
	vol := sys.ToSI(soil.Mass, soilMass) / t.WetDensity
	return fmt.Errorf("the readings give a wet density of %s (--soil-mass %s %s in %s), outside %s: %s; check %s",
		calcShow(sys, soil.Density, t.WetDensity), strconv.FormatFloat(soilMass, 'g', -1, 64), sys.Unit(soil.Mass),
		calcShow(sys, soil.SmallVolume, vol), calcRange(sys, soil.Density, ledger.MinDensity, ledger.MaxDensity),
		calcDensityWhy, calcFlagList(append(from, "units")))
}

// checkCalcSolids refuses a dry density (what it is, in words) at or above
// the density of the solids, Gs x water, when a Gs is given; check says
// what else to check beside --gs.
func checkCalcSolids(sys soil.System, what string, dry, gs, water float64, check string) error {
	if gs == 0 || dry < gs*water {
		return nil
	}
	return fmt.Errorf("%s of %s is at or above the density of the solids, Gs x water = %s (--gs %s): "+
		"no soil is denser than its solids; check --gs and %s",
		what, calcShow(sys, soil.Density, dry), calcShow(sys, soil.Density, gs*water), strconv.FormatFloat(gs, 'g', -1, 64), check)
}

// calcShow writes the SI value v of q in sys at q's resolution, with its unit.
func calcShow(sys soil.System, q soil.Quantity, v float64) string {
	return some(sys.FromSI(q, v), sys.Places(q)).String() + " " + sys.Unit(q)
}

// calcRange writes lo to hi in sys's unit without trailing zeros, with the SI
// bounds beside US ones.
func calcRange(sys soil.System, q soil.Quantity, lo, hi float64) string {
	f := func(s soil.System, v float64) string {
		return strconv.FormatFloat(roundHalfAway(s.FromSI(q, v), s.Places(q)), 'f', -1, 64)
	}
	r := fmt.Sprintf("%s to %s %s", f(sys, lo), f(sys, hi), sys.Unit(q))
	if sys != soil.SI {
		r += fmt.Sprintf(" (%s to %s %s)", f(soil.SI, lo), f(soil.SI, hi), soil.SI.Unit(q))
	}
	return r
}

// calcFlagList writes names as "--a, --b and --c".
func calcFlagList(names []string) string {
	fs := make([]string, len(names))
	for i, n := range names {
		fs[i] = "--" + n
	}
	if len(fs) < 2 {
		return strings.Join(fs, "")
	}
	return strings.Join(fs[:len(fs)-1], ", ") + " and " + fs[len(fs)-1]
}
