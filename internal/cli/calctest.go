package cli

import (
	"fmt"
	"io"
	"math"
	"strings"

	"github.com/spf13/cobra"

	"tamp/internal/qc"
	"tamp/internal/soil"
	"tamp/internal/valid"
)

type testFlags struct {
	units                                 string
	wet, moisture, m, offset              float64
	sandUsed, cone, sandDensity, soilMass float64
	cylDiameter, cylLength                float64
	balloonInitial, balloonFinal          float64
	mdd, omc, gs                          float64
	overPct, overGs, overW                float64
	minRC, window                         string
	probeDepth, lift, water, suspect      float64
	json                                  bool
}

func newCalcTest() *cobra.Command {
	var f testFlags
	c := &cobra.Command{
		Use:   "test",
		Short: "Compute and grade one in-place density test",
		Long: `Compute one in-place density test and grade it against a laboratory reference
and a specification, with no project or server.

The method follows from the flags given:
  sand cone       --sand-used --cone-correction --sand-density --soil-mass --moisture
  drive cylinder  --cylinder-diameter --cylinder-length --soil-mass --moisture
  rubber balloon  --balloon-initial --balloon-final --soil-mass --moisture
  nuclear gauge   --wet-density --water-per-volume [--moisture-offset] [--probe-depth]
  other           --wet-density --moisture (a wet density measured by other means)

Masses are lb (us) or g (si); densities pcf or kg/m3; the cylinder's
dimensions and depths in or mm; the balloon's volume readings ft3 or cm3.
Readings no soil or apparatus can give (a wet density outside 500 to
3500 kg/m3, a dry density at or above the solids' Gs x water, a mass above
200 kg) are refused, not graded: they are most often a unit keyed wrong.
--min-rc is read as written: "95" and "95.0" are different limits, because
conformance is decided on the value rounded to the limit's last place
(AASHTO R 11 / ASTM E29). --moisture-window LO,HI is in points of optimum;
either side may be left empty ("-2," or ",3").

Nuclear gauges are licensed radioactive sources: their use, transport and
storage follow the licensee's radiation-safety programme. Results support, and
never replace, review by qualified personnel; the project's specifications and
local codes govern every acceptance limit.`,
		Example: `  tamp calc test --sand-used 7.00 --cone-correction 0.53 --sand-density 99.0 \
      --soil-mass 8.11 --moisture 11.1 --mdd 116.0 --omc 13.5 --min-rc 95 --moisture-window -2,2
  tamp calc test --cylinder-diameter 4.000 --cylinder-length 5.000 --soil-mass 4.40 --moisture 12.0 \
      --mdd 115.0 --omc 13.0 --min-rc 95
  tamp calc test --units si --balloon-initial 1020 --balloon-final 2850 --soil-mass 3600 --moisture 9
  tamp calc test --wet-density 130.0 --water-per-volume 14.0 --moisture-offset 1.4 --json`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			out, err := computeTest(cmd, f)
			if err != nil {
				return inputError(cmd, err)
			}
			if f.json {
				return writeJSON(cmd.OutOrStdout(), out)
			}
			return out.text(cmd.OutOrStdout())
		},
	}
	fl := c.Flags()
	fl.StringVar(&f.units, "units", "us", "unit system: us (lb, pcf, in) or si (g, kg/m3, mm)")
	fl.Float64Var(&f.wet, "wet-density", 0, "wet (bulk) density as measured, pcf or kg/m3")
	fl.Float64Var(&f.moisture, "moisture", 0, "moisture content, percent of dry mass")
	fl.Float64Var(&f.m, "water-per-volume", 0, "nuclear gauge: mass of water per unit volume M, pcf or kg/m3")
	fl.Float64Var(&f.offset, "moisture-offset", 0, "nuclear gauge: moisture correction for the material, points added to the gauge's moisture")
	fl.Float64Var(&f.sandUsed, "sand-used", 0, "sand cone: sand that left the apparatus, lb or g")
	fl.Float64Var(&f.cone, "cone-correction", 0, "sand cone: sand that fills the cone and base plate, lb or g")
	fl.Float64Var(&f.sandDensity, "sand-density", 0, "sand cone: calibrated bulk density of the sand, pcf or kg/m3")
	fl.Float64Var(&f.soilMass, "soil-mass", 0, "sand cone, rubber balloon: moist soil dug from the hole; drive cylinder: moist soil in the cylinder; lb or g")
	fl.Float64Var(&f.cylDiameter, "cylinder-diameter", 0, "drive cylinder: inside diameter, in or mm")
	fl.Float64Var(&f.cylLength, "cylinder-length", 0, "drive cylinder: length of the soil core (the cylinder's length), in or mm")
	fl.Float64Var(&f.balloonInitial, "balloon-initial", 0, "rubber balloon: volume reading before the hole is dug, ft3 or cm3")
	fl.Float64Var(&f.balloonFinal, "balloon-final", 0, "rubber balloon: volume reading with the balloon filling the hole, ft3 or cm3")
	fl.Float64Var(&f.mdd, "mdd", 0, "reference maximum dry density (of the fraction the laboratory tested), pcf or kg/m3")
	fl.Float64Var(&f.omc, "omc", 0, "reference optimum moisture, percent")
	fl.Float64Var(&f.gs, "gs", 0, "specific gravity of the soil solids, for the zero-air-voids check")
	fl.Float64Var(&f.overPct, "oversize-percent", 0, "oversize: percent of the total dry mass retained on the method's sieve")
	fl.Float64Var(&f.overGs, "oversize-gs", 0, "oversize: bulk specific gravity of the oversize particles")
	fl.Float64Var(&f.overW, "oversize-moisture", 0, "oversize: moisture of the oversize particles, percent")
	fl.StringVar(&f.minRC, "min-rc", "", `minimum relative compaction, percent, as written ("95" or "95.0")`)
	fl.StringVar(&f.window, "moisture-window", "", "moisture window LO,HI in points of optimum (e.g. -2,2)")
	fl.Float64Var(&f.probeDepth, "probe-depth", 0, "nuclear gauge: direct-transmission depth, in or mm")
	fl.Float64Var(&f.lift, "lift-thickness", 0, "thickness of the lift tested, in or mm (checked against the probe depth)")
	fl.Float64Var(&f.water, "water-density", 0, "density of water, pcf or kg/m3 (default 62.4 pcf or 1000 kg/m3)")
	fl.Float64Var(&f.suspect, "suspect-rc", qc.DefaultSuspectCompaction, "flag relative compaction above this percent")
	fl.BoolVar(&f.json, "json", false, "print one JSON object")
	_ = c.RegisterFlagCompletionFunc("units", cobra.FixedCompletions([]string{"us", "si"}, cobra.ShellCompDirectiveNoFileComp))
	return c
}

func computeTest(cmd *cobra.Command, f testFlags) (*testOut, error) {
	sys, err := soil.ParseSystem(f.units)
	if err != nil {
		return nil, err
	}
	set := cmd.Flags().Changed
	si := sys.ToSI
	water := soil.Water624
	if sys == soil.SI {
		water = soil.Water1000
	}
	if set("water-density") {
		water = si(soil.Density, f.water)
	}

	var test soil.InPlace
	method, err := holeMethod(set)
	if err != nil {
		return nil, err
	}
	if err := checkCalcReadings(cmd, sys); err != nil {
		return nil, err
	}
	switch {
	case method == soil.SandConeMethod:
		test, err = soil.SandCone{SandDensity: si(soil.Density, f.sandDensity), SandUsed: si(soil.Mass, f.sandUsed),
			ConeCorrection: si(soil.Mass, f.cone), SoilMass: si(soil.Mass, f.soilMass), Moisture: f.moisture}.Compute()
	case method == soil.DriveCylinderMethod:
		test, err = soil.DriveCylinder{Diameter: si(soil.Depth, f.cylDiameter), Length: si(soil.Depth, f.cylLength),
			SoilMass: si(soil.Mass, f.soilMass), Moisture: f.moisture}.Compute()
	case method == soil.RubberBalloonMethod:
		if f.balloonFinal <= f.balloonInitial {
			return nil, required("balloon-final", fmt.Sprintf("must exceed --balloon-initial %s: the hole's volume is the final reading less the initial",
				cmd.Flags().Lookup("balloon-initial").Value))
		}
		test, err = soil.RubberBalloon{InitialReading: si(soil.SmallVolume, f.balloonInitial), FinalReading: si(soil.SmallVolume, f.balloonFinal),
			SoilMass: si(soil.Mass, f.soilMass), Moisture: f.moisture}.Compute()
	case set("water-per-volume"):
		if !set("wet-density") {
			return nil, required("wet-density", "is required with --water-per-volume")
		}
		if set("moisture") {
			return nil, required("moisture", "give --moisture or --water-per-volume, not both")
		}
		n := soil.Nuclear{ProbeDepth: si(soil.Depth, f.probeDepth),
			Readings: []soil.NuclearReading{{WetDensity: si(soil.Density, f.wet), WaterPerVolume: si(soil.Density, f.m)}}}
		if set("moisture-offset") {
			n.Correction = &soil.MoistureCorrection{Kind: soil.Offset, Value: f.offset}
		}
		test, err = n.Compute()
	default:
		if !set("wet-density") || !set("moisture") {
			return nil, required("wet-density", "give --wet-density and --moisture, a nuclear reading (--wet-density --water-per-volume), "+
				"or the readings of a sand cone, drive cylinder or rubber balloon with --soil-mass and --moisture")
		}
		for _, name := range []string{"moisture-offset", "probe-depth"} {
			if set(name) {
				return nil, required(name, "applies to a nuclear reading (--water-per-volume)")
			}
		}
		test, err = soil.WetDensityTest{WetDensity: si(soil.Density, f.wet), Moisture: f.moisture}.Compute()
	}
	if err != nil {
		return nil, err
	}
	if err := checkCalcWetDensity(sys, test, f.soilMass); err != nil {
		return nil, err
	}

	in := qc.Input{Test: test, Water: water, Units: sys, LiftThickness: si(soil.Depth, f.lift), Spec: qc.Spec{SuspectCompaction: f.suspect}}
	if set("mdd") != set("omc") {
		return nil, required("omc", "--mdd and --omc go together (the laboratory reference)")
	}
	if set("mdd") {
		in.Reference = qc.Reference{MaxDryDensity: si(soil.Density, f.mdd), OptimumMoisture: f.omc}
		if f.mdd == 0 {
			return nil, required("mdd", "must be greater than zero")
		}
	}
	if set("gs") {
		in.Gs = f.gs
		if err := valid.Range("gs", f.gs, soil.MinGs, soil.MaxGs, ""); err != nil {
			return nil, err
		}
		if err := checkCalcSolids(sys, "the dry density", test.DryDensity, f.gs, water, "the readings and --moisture"); err != nil {
			return nil, err
		}
		if set("mdd") {
			if err := checkCalcSolids(sys, "--mdd "+cmd.Flags().Lookup("mdd").Value.String()+": a maximum dry density", in.Reference.MaxDryDensity, f.gs, water, "--mdd"); err != nil {
				return nil, err
			}
		}
	}
	if set("oversize-percent") {
		if !set("oversize-gs") || !set("oversize-moisture") {
			return nil, required("oversize-gs", "--oversize-gs and --oversize-moisture are required with --oversize-percent")
		}
		if !set("mdd") {
			return nil, required("mdd", "is required with --oversize-percent (the correction applies to the reference)")
		}
		in.Oversize = &soil.Oversize{Percent: f.overPct, BulkGs: f.overGs, Moisture: f.overW}
	}
	if set("min-rc") {
		l, err := qc.ParseLimit("min-rc", f.minRC)
		if err != nil {
			return nil, err
		}
		in.Spec.MinCompaction = &l
	}
	if set("moisture-window") {
		lo, hi, ok := strings.Cut(f.window, ",")
		if !ok || strings.TrimSpace(lo) == "" && strings.TrimSpace(hi) == "" {
			return nil, required("moisture-window", fmt.Sprintf("must be LO,HI in points of optimum, such as -2,2 (got %q)", f.window))
		}
		for _, b := range []struct {
			s   string
			dst **qc.Limit
		}{{lo, &in.Spec.MoistureLow}, {hi, &in.Spec.MoistureHigh}} {
			if strings.TrimSpace(b.s) == "" {
				continue
			}
			l, err := qc.ParseLimit("moisture-window", b.s)
			if err != nil {
				return nil, err
			}
			*b.dst = &l
		}
		if in.Spec.MoistureLow != nil && in.Spec.MoistureHigh != nil && in.Spec.MoistureLow.Value > in.Spec.MoistureHigh.Value {
			return nil, required("moisture-window", "LO must not exceed HI")
		}
		if !set("omc") {
			return nil, required("omc", "is required with --moisture-window")
		}
	}
	if set("min-rc") && !set("mdd") {
		return nil, required("mdd", "is required with --min-rc")
	}
	res, err := qc.Grade(in)
	if err != nil {
		return nil, err
	}
	o := newTestOut(sys, test, res)
	o.minRC, o.window = strings.TrimSpace(f.minRC), strings.TrimSpace(f.window)
	return o, nil
}

// holeMethods are the methods that weigh the moist soil of a measured
// volume, with the flags that measure the volume (beside --soil-mass and
// --moisture).
var holeMethods = []struct {
	method soil.Method
	name   string
	flags  []string
}{
	{soil.SandConeMethod, "sand-cone", []string{"sand-used", "cone-correction", "sand-density"}},
	{soil.DriveCylinderMethod, "drive-cylinder", []string{"cylinder-diameter", "cylinder-length"}},
	{soil.RubberBalloonMethod, "rubber-balloon", []string{"balloon-initial", "balloon-final"}},
}

// holeMethod returns the method whose volume flags are set, after checking
// that its readings are all given and that no other method's are; it
// returns "" when none is set (a nuclear reading or a wet density).
func holeMethod(set func(string) bool) (soil.Method, error) {
	var given []int
	var first []string // the first flag set of each method given
	for i, m := range holeMethods {
		for _, name := range m.flags {
			if set(name) {
				given, first = append(given, i), append(first, name)
				break
			}
		}
	}
	switch {
	case len(given) == 0 && set("soil-mass"):
		return "", required("soil-mass", "needs the volume the soil came from: sand-cone readings (--sand-used --cone-correction --sand-density), "+
			"--cylinder-diameter and --cylinder-length, or --balloon-initial and --balloon-final")
	case len(given) == 0:
		return "", nil
	case len(given) > 1:
		return "", required(first[1], fmt.Sprintf("give the readings of one method only: %s readings were given with %s readings (--%s)",
			holeMethods[given[1]].name, holeMethods[given[0]].name, first[0]))
	}
	m := holeMethods[given[0]]
	for _, name := range append(append([]string{}, m.flags...), "soil-mass", "moisture") {
		if !set(name) {
			return "", required(name, "is required for a "+m.name+" test")
		}
	}
	for _, name := range []string{"wet-density", "water-per-volume", "moisture-offset", "probe-depth"} {
		if set(name) {
			return "", required(name, "does not apply to a "+m.name+" test")
		}
	}
	return m.method, nil
}

type stepOut struct {
	Name  string `json:"name"`
	Value num    `json:"value"`
	Unit  string `json:"unit"`
}

type testOut struct {
	Units               string             `json:"units"`
	Method              string             `json:"method"`
	WetDensity          num                `json:"wet_density"`
	DryDensity          num                `json:"dry_density"`
	Moisture            num                `json:"moisture"`
	MaxDryDensity       num                `json:"max_dry_density"`
	OptimumMoisture     num                `json:"optimum_moisture"`
	RelativeCompaction  num                `json:"relative_compaction"`
	MoistureDeviation   num                `json:"moisture_deviation"`
	ZeroAirVoidsDensity *num               `json:"zero_air_voids_density,omitempty"`
	Saturation          *num               `json:"saturation,omitempty"`
	Verdict             string             `json:"verdict"`
	Reasons             []qc.Finding       `json:"reasons"`
	Flags               []qc.Finding       `json:"flags"`
	Steps               []stepOut          `json:"steps"`
	Unrounded           map[string]float64 `json:"unrounded"`
	Rounding            string             `json:"rounding"`
	Cautions            []string           `json:"cautions"`

	sys soil.System

	// the limits as the user wrote them, printed beside the values judged
	minRC, window string
}

func newTestOut(sys soil.System, t soil.InPlace, r qc.Result) *testOut {
	d := func(v float64) num { return some(sys.FromSI(soil.Density, v), sys.Places(soil.Density)) }
	pct := func(v float64) num { return some(v, 1) }
	graded := r.Verdict != qc.Pending
	o := &testOut{
		Units: sys.String(), Method: string(t.Method), sys: sys,
		WetDensity: d(r.WetDensity), DryDensity: d(r.DryDensity), Moisture: pct(r.Moisture),
		Verdict: string(r.Verdict), Reasons: r.Reasons, Flags: r.Flags,
		Rounding: qc.RoundingNote, Cautions: []string{qc.Caution},
		Unrounded: map[string]float64{
			"wet_density": sys.FromSI(soil.Density, r.WetDensity), "dry_density": sys.FromSI(soil.Density, r.DryDensity),
			"moisture": r.Moisture,
		},
	}
	if graded {
		o.MaxDryDensity, o.OptimumMoisture = d(r.MaxDryDensity), pct(r.OptimumMoisture)
		o.RelativeCompaction, o.MoistureDeviation = pct(r.RelativeCompaction), pct(r.MoistureDeviation)
		o.Unrounded["max_dry_density"] = sys.FromSI(soil.Density, r.MaxDryDensity)
		o.Unrounded["optimum_moisture"] = r.OptimumMoisture
		o.Unrounded["relative_compaction"] = r.RelativeCompaction
		o.Unrounded["moisture_deviation"] = r.MoistureDeviation
	}
	if r.ZeroAirVoids != 0 {
		z, s := d(r.ZeroAirVoids), pct(r.Saturation)
		o.ZeroAirVoidsDensity, o.Saturation = &z, &s
		o.Unrounded["zero_air_voids_density"] = sys.FromSI(soil.Density, r.ZeroAirVoids)
		o.Unrounded["saturation"] = r.Saturation
	}
	for k, v := range o.Unrounded {
		o.Unrounded[k] = math.Round(v*1e9) / 1e9 // drop binary noise, keep every meaningful digit
	}
	if o.Reasons == nil {
		o.Reasons = []qc.Finding{}
	}
	if o.Flags == nil {
		o.Flags = []qc.Finding{}
	}
	if t.Method == soil.NuclearDirect || t.Method == soil.NuclearBackscatter {
		o.Cautions = append(o.Cautions, qc.NuclearCaution)
	}
	for _, s := range t.Steps {
		places := sys.Places(s.Quantity)
		if s.Quantity == soil.SmallVolume && sys == soil.US {
			places = 6
		}
		o.Steps = append(o.Steps, stepOut{s.Name, some(sys.FromSI(s.Quantity, s.Value), places), sys.Unit(s.Quantity)})
	}
	return o
}

var methodTitles = map[soil.Method]string{
	soil.NuclearDirect:       "Nuclear gauge, direct transmission (ASTM D6938)",
	soil.NuclearBackscatter:  "Nuclear gauge, backscatter (ASTM D6938)",
	soil.SandConeMethod:      "Sand cone (ASTM D1556 / AASHTO T 191)",
	soil.DriveCylinderMethod: "Drive cylinder (ASTM D2937)",
	soil.RubberBalloonMethod: "Rubber balloon (ASTM D2167)",
	soil.MeasuredWetDensity:  "Wet density as measured",
}

func (o *testOut) text(w io.Writer) error {
	p := &printer{w: w}
	du, unitName := o.sys.Unit(soil.Density), "US customary"
	if o.sys == soil.SI {
		unitName = "SI"
	}
	p.f("%s, %s units\n", methodTitles[soil.Method(o.Method)], unitName)
	for _, s := range o.Steps {
		p.f("  %-44s %12s %s\n", s.Name, s.Value, s.Unit)
	}
	if o.Verdict != string(qc.Pending) {
		p.f("Reference\n")
		p.f("  %-44s %12s %s\n", "maximum dry density", o.MaxDryDensity, du)
		p.f("  %-44s %12s %%\n", "optimum moisture", o.OptimumMoisture)
		p.f("  %-44s %12s %%%s\n", "relative compaction", o.RelativeCompaction, limitNote("min "+o.minRC+" %", o.minRC != ""))
		lo, hi, _ := strings.Cut(o.window, ",")
		p.f("  %-44s %12s points%s\n", "moisture deviation from optimum", o.MoistureDeviation,
			limitNote("window "+strings.TrimSpace(lo)+" to "+strings.TrimSpace(hi)+" points", o.window != ""))
	}
	if o.ZeroAirVoidsDensity != nil {
		p.f("  %-44s %12s %s\n", "zero-air-voids dry density", *o.ZeroAirVoidsDensity, du)
		p.f("  %-44s %12s %%\n", "degree of saturation", *o.Saturation)
	}
	switch qc.Verdict(o.Verdict) {
	case qc.Pending:
		p.f("Verdict: not graded (no reference given: --mdd and --omc)\n")
	default:
		p.f("Verdict: %s\n", strings.ToUpper(o.Verdict))
	}
	for _, r := range o.Reasons {
		p.f("  - %s\n", r.Message)
	}
	if len(o.Flags) > 0 {
		p.f("For review (flags do not change the verdict):\n")
		for _, fl := range o.Flags {
			p.f("  - [%s] %s\n", fl.Code, fl.Message)
		}
	}
	p.f("\n%s\n", o.Rounding)
	for _, c := range o.Cautions {
		p.f("%s\n", c)
	}
	return p.err
}

// limitNote is the limit a value was judged against, printed beside it,
// or "" when no limit was given.
func limitNote(limit string, given bool) string {
	if !given {
		return ""
	}
	return "   (" + limit + ")"
}

// printer writes formatted text and keeps the first error.
type printer struct {
	w   io.Writer
	err error
}

func (p *printer) f(format string, args ...any) {
	if p.err == nil {
		_, p.err = fmt.Fprintf(p.w, format, args...)
	}
}
