package cli

import (
	"errors"
	"fmt"
	"math"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"

	"tamp/client"
	"tamp/internal/soil"
	"tamp/internal/words"
)

// pick finds the record a flag names: by id, by one of its names (letter
// case ignored), or by the last characters of its id (at least four). The
// error says which value matched nothing or several, lists what there is,
// and says how to add one.
func pick[T any](flag, given, what, add string, items []T, id func(T) string, names func(T) []string, label func(T) string) (T, error) {
	var zero T
	g := strings.TrimSpace(given)
	var byName, bySuffix []T
	for _, it := range items {
		if id(it) == g {
			return it, nil
		}
		for _, n := range names(it) {
			if n != "" && strings.EqualFold(strings.TrimSpace(n), g) {
				byName = append(byName, it)
				break
			}
		}
		if len(g) >= 4 && strings.HasSuffix(id(it), strings.ToLower(g)) {
			bySuffix = append(bySuffix, it)
		}
	}
	found := byName
	if len(found) == 0 {
		found = bySuffix
	}
	if len(found) == 1 {
		return found[0], nil
	}
	list := func(its []T) string {
		if len(its) == 0 {
			return fmt.Sprintf("This device holds no %s for the project; %s, or sync to get them (tamp sync).", what, add)
		}
		var b strings.Builder
		fmt.Fprintf(&b, "The %s on this device:", what)
		for _, it := range its {
			fmt.Fprintf(&b, "\n  %s", label(it))
		}
		return b.String()
	}
	if len(found) == 0 {
		return zero, failf("--%s %s: no %s by that name or id\n%s", flag, quoted(given), strings.TrimSuffix(what, "s"), list(items))
	}
	return zero, failf("--%s %s: %d %s match; give the id\n%s", flag, quoted(given), len(found), what, list(found))
}

func (ss *session) spec(given string) (client.Spec, error) {
	return pick("spec", given, "specs", "QA adds one with tamp spec add", ss.s.Specs(ss.project),
		func(s client.Spec) string { return s.ID }, func(s client.Spec) []string { return []string{s.Name} },
		func(s client.Spec) string { return quoted(s.Name) + "  " + words.ShortID(s.ID) })
}

func (ss *session) reference(given string) (client.LabReference, error) {
	return pick("reference", given, "references", "QA adds one with tamp reference add", ss.s.References(ss.project),
		func(r client.LabReference) string { return r.ID },
		func(r client.LabReference) []string { return []string{r.LabSampleID, r.Material, referenceName(r)} },
		func(r client.LabReference) string { return quoted(referenceName(r)) + "  " + words.ShortID(r.ID) })
}

func (ss *session) equipment(flag, given string) (client.EquipmentRecord, error) {
	return pick(flag, given, "equipment", "the office adds it with tamp equipment add", ss.s.Equipment(ss.project),
		func(e client.EquipmentRecord) string { return e.ID },
		func(e client.EquipmentRecord) []string { return []string{e.SerialNumber, equipmentName(e.Equipment)} },
		func(e client.EquipmentRecord) string {
			return quoted(equipmentName(e.Equipment)) + "  " + words.ShortID(e.ID)
		})
}

func (ss *session) borrow(given string) (client.BorrowRecord, error) {
	return pick("borrow", given, "borrow sources", "QA adds one with tamp borrow add", ss.s.BorrowSources(ss.project),
		func(b client.BorrowRecord) string { return b.ID }, func(b client.BorrowRecord) []string { return []string{b.Name} },
		func(b client.BorrowRecord) string { return quoted(b.Name) + "  " + words.ShortID(b.ID) })
}

func (ss *session) placement(given string) (client.Placement, error) {
	return pick("placement", given, "placements", "the office records one with tamp placement add", ss.s.Placements(ss.project),
		func(p client.Placement) string { return p.ID }, func(p client.Placement) []string { return []string{placementName(p)} },
		func(p client.Placement) string { return quoted(placementName(p)) + "  " + words.ShortID(p.ID) })
}

// referenceName is how a reference is named: its lab sample id and
// material, or the material alone.
func referenceName(r client.LabReference) string {
	if r.LabSampleID == "" {
		return r.Material
	}
	if r.Material == "" {
		return r.LabSampleID
	}
	return r.LabSampleID + " " + r.Material
}

// equipmentName is how a piece of equipment is named: its model and serial
// number.
func equipmentName(e client.Equipment) string {
	return strings.TrimSpace(e.Model + " " + e.SerialNumber)
}

// placementName names a placement by its feature and lift: "embankment
// lift 3".
func placementName(p client.Placement) string {
	return fmt.Sprintf("%s lift %d", p.Feature, p.LiftNumber)
}

// entryFlags maps the fields an entry error names to the flags that set
// them, where their names differ.
var entryFlags = map[string]string{
	"min_compaction": "min-rc", "moisture_low": "moisture-window", "moisture_high": "moisture-window",
	"max_dry_density": "mdd", "optimum_moisture": "omc", "specific_gravity": "gs", "serial_number": "serial",
	"compacted_volume": "volume", "loose_volume_per_load": "load-volume", "bank_tests": "bank-test",
	"diameter": "cylinder-diameter", "length": "cylinder-length", "initial_reading": "balloon-initial",
	"final_reading": "balloon-final", "percent": "oversize-percent", "bulk_gs": "oversize-gs",
	"counts": "wet-density", "suspect_compaction": "suspect-rc", "lift_thickness": "lift-thickness",
	"density_count": "density-count", "moisture_count": "moisture-count", "comment": "comment", "reason": "reason",
}

var index = regexp.MustCompile(`\[\d+\]`)

// entryError says which flag an entry the store refused came from: a
// *client.EntryError names the entry's field, which maps to a flag of cmd
// (its value as typed is quoted), with the rule broken and, for a rule of
// who may do what, what to do.
func entryError(cmd *cobra.Command, err error) error {
	var ee *client.EntryError
	if !errors.As(err, &ee) {
		return err
	}
	if ee.Rule != "" {
		return failf("%s (rule %s)\n%s", escape(ee.Message), ee.Rule, ruleAdvice(ee.Rule))
	}
	field := index.ReplaceAllString(ee.Field, "")
	last := field[strings.LastIndex(field, ".")+1:]
	name, ok := entryFlags[last]
	if !ok {
		name = strings.ReplaceAll(last, "_", "-")
	}
	if fl := cmd.Flags().Lookup(name); fl != nil {
		if fl.Changed {
			typed := fl.Value.String()
			if sv, ok := fl.Value.(pflag.SliceValue); ok {
				vs := sv.GetSlice()
				for i, v := range vs {
					if f, err := strconv.ParseFloat(v, 64); err == nil {
						vs[i] = strconv.FormatFloat(f, 'f', -1, 64)
					}
				}
				typed = strings.Join(vs, ",")
			}
			return failf("--%s %s: %s (%s)", name, escape(typed), escape(ee.Message), ee.Field)
		}
		return failf("--%s: %s (%s)", name, escape(ee.Message), ee.Field)
	}
	return failf("%s: %s", ee.Field, escape(ee.Message))
}

// ruleAdvice says what to do about an entry refused by a rule of who may
// make it.
func ruleAdvice(rule string) string {
	switch rule {
	case "own_tests_only":
		return "Only the inspector who recorded a test corrects or voids it; ask them, or record a new test."
	case "no_self_review":
		return "Someone else in the office or QA must review or accept a test you recorded."
	}
	return "Check your role on the project (tamp admin members)."
}

// parseList reads numbers separated by commas.
func parseList(flag, s string) ([]float64, error) {
	var out []float64
	for i, f := range strings.Split(s, ",") {
		v, err := strconv.ParseFloat(strings.TrimSpace(f), 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, failf("--%s %s: item %d (%s) is not a number; give numbers separated by commas", flag, escape(s), i+1, quoted(f))
		}
		out = append(out, v)
	}
	return out, nil
}

// parsePairs reads pairs A:B separated by commas.
func parsePairs(flag, s, form string) ([][2]float64, error) {
	var out [][2]float64
	for i, f := range strings.Split(s, ",") {
		a, b, ok := strings.Cut(strings.TrimSpace(f), ":")
		x, err1 := strconv.ParseFloat(strings.TrimSpace(a), 64)
		y, err2 := strconv.ParseFloat(strings.TrimSpace(b), 64)
		if !ok || err1 != nil || err2 != nil || math.IsNaN(x+y) || math.IsInf(x+y, 0) {
			return nil, failf("--%s %s: item %d (%s) is not %s; write pairs such as %s separated by commas", flag, escape(s), i+1, quoted(f), form, form)
		}
		out = append(out, [2]float64{x, y})
	}
	return out, nil
}

// checkDate checks a date flag is YYYY-MM-DD.
func checkDate(flag, s string) error {
	if _, err := time.Parse(time.DateOnly, s); err != nil {
		return failf("--%s %s: write the date as YYYY-MM-DD, e.g. 2031-06-30", flag, quoted(s))
	}
	return nil
}

// standards maps what people type for a compaction standard to it.
var standards = map[string]client.Standard{
	"astmd698": client.ASTMD698, "d698": client.ASTMD698, "aashtot99": client.AASHTOT99, "t99": client.AASHTOT99,
	"astmd1557": client.ASTMD1557, "d1557": client.ASTMD1557, "aashtot180": client.AASHTOT180, "t180": client.AASHTOT180,
}

func parseStandard(s string) (client.Standard, error) {
	k := strings.ToLower(strings.NewReplacer(" ", "", "-", "", "_", "").Replace(s))
	if st, ok := standards[k]; ok {
		return st, nil
	}
	return "", failf("--standard %s: must be ASTM D698, ASTM D1557, AASHTO T 99 or AASHTO T 180 (D698, T99... will do)", quoted(s))
}

func newSpec() *cobra.Command {
	var f projectFlags
	c := &cobra.Command{Use: "spec", Short: "Define and list acceptance specifications (QA)"}
	f.register(c)

	var name, minRC, window, basis string
	var suspect, perTest, areaPer, lengthPer, lotPWL float64
	var minPerLift uint32
	add := &cobra.Command{
		Use:   "add",
		Short: "Define a specification: minimum relative compaction and moisture window, as written",
		Long: `Define an acceptance specification. Limits are kept as written: conformance is
decided on each value rounded to the last place of its limit (AASHTO R 11 /
ASTM E29), so 94.6 conforms to --min-rc 95 and not to --min-rc 95.0.
--moisture-window LO,HI is in points of optimum (or percent of optimum with
--moisture-basis percent); either side may be left empty ("-2," or ",3").
--volume-per-test, --area-per-test, --length-per-test and --min-per-lift set
the test frequency: one test per so many yd3 or m3 of compacted fill, ft2 or
m2 of lift, ft or m of alignment, and at least so many on every lift; a lift
needs the most any of them asks. --lot-pwl is the percent within limits a lot
must reach (tamp qa lots). A test is graded against the spec it names, so a later
spec never re-grades history. The project's specifications govern.`,
		Example: `  tamp spec add --name "embankment" --min-rc 95 --moisture-window -2,2 --volume-per-test 500`,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			if strings.TrimSpace(name) == "" {
				return failf("--name: a spec needs a name, which tests name it by")
			}
			sp := client.Spec{Name: name, MinCompaction: minRC, SuspectCompaction: suspect, MoistureBasis: client.PointsOfOptimum}
			switch basis {
			case "points":
			case "percent":
				sp.MoistureBasis = client.PercentOfOptimum
			default:
				return failf("--moisture-basis %s: must be points (w - optimum) or percent (w / optimum x 100)", quoted(basis))
			}
			if window != "" {
				lo, hi, ok := strings.Cut(window, ",")
				if !ok {
					return failf("--moisture-window %s: write LO,HI such as -2,2 (either side may be empty: -2, or ,3)", quoted(window))
				}
				sp.MoistureLow, sp.MoistureHigh = strings.TrimSpace(lo), strings.TrimSpace(hi)
			}
			if perTest > 0 {
				sp.VolumePerTest = ss.u.toSI(soil.Volume, perTest)
			}
			sp.AreaPerTest, sp.LengthPerTest = ss.u.areaToSI(areaPer), ss.u.toSI(soil.Length, lengthPer)
			sp.MinTestsPerLift, sp.LotAcceptancePWL = minPerLift, lotPWL
			if _, err := ss.spec(name); err == nil {
				return failf("--name %s: the project has a spec of that name already; choose another name", quoted(name))
			}
			id, err := ss.s.DefineSpec(cmd.Context(), ss.project, sp)
			if err != nil {
				return entryError(cmd, err)
			}
			_, err = fmt.Fprintf(cmd.OutOrStdout(), "spec %s defined (%s); it reaches the server with the next tamp sync\n", quoted(name), words.ShortID(id))
			return err
		},
	}
	fl := add.Flags()
	fl.StringVar(&name, "name", "", "the spec's name, e.g. \"embankment\"")
	fl.StringVar(&minRC, "min-rc", "", `minimum relative compaction, percent, as written ("95" or "95.0")`)
	fl.StringVar(&window, "moisture-window", "", "moisture window LO,HI, e.g. -2,2")
	fl.StringVar(&basis, "moisture-basis", "points", "points (of optimum) or percent (of optimum)")
	fl.Float64Var(&suspect, "suspect-rc", 0, "flag relative compaction above this percent (default 105)")
	fl.Float64Var(&perTest, "volume-per-test", 0, "one test required per this compacted volume, yd3 or m3")
	fl.Float64Var(&areaPer, "area-per-test", 0, "one test required per this area of lift, ft2 or m2")
	fl.Float64Var(&lengthPer, "length-per-test", 0, "one test required per this length of alignment, ft or m")
	fl.Uint32Var(&minPerLift, "min-per-lift", 0, "at least this many tests on every lift")
	fl.Float64Var(&lotPWL, "lot-pwl", 0, "percent within limits a lot must reach, e.g. 90")

	var asJSON bool
	list := &cobra.Command{
		Use: "list", Short: "List the project's specifications", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			specs := ss.s.Specs(ss.project)
			if asJSON {
				type row struct {
					client.Spec
					VolumePerTest num    `json:"volume_per_test"`
					Units         string `json:"units"`
				}
				rows := []row{}
				for _, sp := range specs {
					rows = append(rows, row{Spec: sp, VolumePerTest: ss.u.num(soil.Volume, sp.VolumePerTest), Units: ss.u.name()})
				}
				return writeJSON(cmd.OutOrStdout(), rows)
			}
			t := newTable(cmd.OutOrStdout(), "SPEC", "MIN RC", "MOISTURE WINDOW", "ONE TEST PER", "ID")
			for _, sp := range specs {
				lim := client.Limits{MinCompaction: sp.MinCompaction, MoistureBasis: sp.MoistureBasis, MoistureLow: sp.MoistureLow, MoistureHigh: sp.MoistureHigh}
				per := "-"
				if sp.VolumePerTest > 0 {
					per = ss.u.show(soil.Volume, sp.VolumePerTest)
				}
				t.row(sp.Name, orDefault(words.CompactionLimit(lim), "-"), orDefault(words.MoistureLimit(lim), "-"), per, words.ShortID(sp.ID))
			}
			return t.flush()
		},
	}
	jsonFlag(list, &asJSON)
	c.AddCommand(add, list)
	return c
}

func newReference() *cobra.Command {
	var f projectFlags
	c := &cobra.Command{Use: "reference", Short: "Add and list laboratory compaction references (QA)"}
	f.register(c)

	var material, sample, standard, method, points string
	var edition int
	var mdd, omc, gs float64
	add := &cobra.Command{
		Use:   "add",
		Short: "Add a laboratory reference: a curve's points, fitted, or the lab's MDD and OMC",
		Long: `Add a laboratory compaction reference, the maximum dry density and optimum
moisture that tests are graded against. Give either the curve's points
(--points W:D,W:D,... moisture percent : dry density in pcf or kg/m3), and
tamp fits the peak, or the laboratory's reported --mdd and --omc. Either way
name the --standard (ASTM D698, ASTM D1557, AASHTO T 99, AASHTO T 180) and
its --method letter (A to D), which bound the particle sizes the test covers.
--gs, the specific gravity of the solids, adds the zero-air-voids check.
Oversize particles are corrected for per test (tamp test record
--oversize-percent).`,
		Example: `  tamp reference add --sample L-12 --material "brown silty sand" --standard D698 --method A \
      --points 8.5:112.0,10.5:115.2,12.5:116.1,14.5:113.4 --gs 2.68
  tamp reference add --material "crushed base" --standard T180 --method D --mdd 138.5 --omc 6.8`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			if strings.TrimSpace(material) == "" && strings.TrimSpace(sample) == "" {
				return failf("--material, --sample: name the reference by its material, its lab sample id, or both")
			}
			st, err := parseStandard(standard)
			if err != nil {
				return err
			}
			r := client.Reference{Material: material, LabSampleID: sample, Standard: st, Method: strings.ToUpper(method), Edition: edition,
				SpecificGravity: gs}
			set := cmd.Flags().Changed
			switch {
			case set("points") && (set("mdd") || set("omc")):
				return failf("--points, --mdd: give the curve's points (tamp fits the peak) or the laboratory's --mdd and --omc, not both")
			case set("points"):
				pairs, err := parsePairs("points", points, "W:D (moisture %:dry density)")
				if err != nil {
					return err
				}
				for _, p := range pairs {
					r.Points = append(r.Points, client.CurvePoint{Moisture: p[0], DryDensity: ss.u.toSI(soil.Density, p[1])})
				}
			case set("mdd") != set("omc"):
				return failf("--mdd, --omc: the laboratory's maximum dry density and optimum moisture go together")
			case set("mdd"):
				r.MaxDryDensity, r.OptimumMoisture = ss.u.toSI(soil.Density, mdd), omc
			default:
				return failf("--points or --mdd/--omc: give the curve's points or the laboratory's maximum dry density and optimum")
			}
			id, err := ss.s.AddReference(cmd.Context(), ss.project, r)
			if err != nil {
				return entryError(cmd, err)
			}
			for _, lr := range ss.s.References(ss.project) {
				if lr.ID != id {
					continue
				}
				how := "as reported"
				if lr.Fitted {
					how = "fitted to " + strconv.Itoa(len(lr.Points)) + " points"
				}
				p := &printer{w: cmd.OutOrStdout()}
				p.f("reference %s added (%s): maximum dry density %s at %s optimum moisture, %s; %s method %s\n",
					quoted(referenceName(lr)), words.ShortID(id), ss.u.show(soil.Density, lr.GradingMaxDryDensity),
					ss.u.show(soil.Percent, lr.GradingOptimumMoisture), how, lr.Standard, escape(lr.Method))
				printFindings(p, "For review:", lr.Flags)
				return p.err
			}
			return nil
		},
	}
	fl := add.Flags()
	fl.StringVar(&material, "material", "", "the material, e.g. \"brown silty sand\"")
	fl.StringVar(&sample, "sample", "", "the laboratory's sample id")
	fl.StringVar(&standard, "standard", "", "ASTM D698, ASTM D1557, AASHTO T 99 or AASHTO T 180")
	fl.StringVar(&method, "method", "", "the standard's method letter, A to D")
	fl.IntVar(&edition, "edition", 0, "the standard's edition year, e.g. 2012")
	fl.StringVar(&points, "points", "", "curve points W:D,... (moisture %, dry density pcf or kg/m3)")
	fl.Float64Var(&mdd, "mdd", 0, "the laboratory's maximum dry density, pcf or kg/m3")
	fl.Float64Var(&omc, "omc", 0, "the laboratory's optimum moisture, percent")
	fl.Float64Var(&gs, "gs", 0, "specific gravity of the soil solids (for the zero-air-voids check)")

	var asJSON bool
	list := &cobra.Command{
		Use: "list", Short: "List the project's laboratory references", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			refs := ss.s.References(ss.project)
			if asJSON {
				type row struct {
					ID              string           `json:"id"`
					Name            string           `json:"name"`
					Material        string           `json:"material"`
					Sample          string           `json:"lab_sample_id"`
					Standard        client.Standard  `json:"standard"`
					Method          string           `json:"method"`
					MaxDryDensity   num              `json:"max_dry_density"`
					OptimumMoisture num              `json:"optimum_moisture"`
					Fitted          bool             `json:"fitted"`
					Bracketed       bool             `json:"bracketed"`
					Flags           []client.Finding `json:"flags"`
					AddedBy         string           `json:"added_by"`
					Units           string           `json:"units"`
				}
				rows := []row{}
				for _, r := range refs {
					rows = append(rows, row{ID: r.ID, Name: referenceName(r), Material: r.Material, Sample: r.LabSampleID, Standard: r.Standard,
						Method: r.Method, MaxDryDensity: ss.u.num(soil.Density, r.GradingMaxDryDensity), OptimumMoisture: some(r.GradingOptimumMoisture, 1),
						Fitted: r.Fitted, Bracketed: r.Bracketed, Flags: nonNil(r.Flags), AddedBy: ss.who(r.RecordedBy), Units: ss.u.name()})
				}
				return writeJSON(cmd.OutOrStdout(), rows)
			}
			t := newTable(cmd.OutOrStdout(), "REFERENCE", "PROCEDURE", "MAX DRY DENSITY", "OPTIMUM", "FROM", "ADDED BY", "ID")
			for _, r := range refs {
				from := "reported"
				if r.Fitted {
					from = fmt.Sprintf("fit, %d points", len(r.Points))
					if !r.Bracketed {
						from += ", peak not bracketed"
					}
				}
				t.row(referenceName(r), string(r.Standard)+" "+r.Method, ss.u.show(soil.Density, r.GradingMaxDryDensity),
					ss.u.show(soil.Percent, r.GradingOptimumMoisture), from, ss.who(r.RecordedBy), words.ShortID(r.ID))
			}
			return t.flush()
		},
	}
	jsonFlag(list, &asJSON)
	c.AddCommand(add, list)
	return c
}

var equipmentKinds = map[string]client.EquipmentKind{
	"nuclear-gauge": client.NuclearGaugeEquipment, "sand-cone": client.SandConeApparatus, "drive-cylinder": client.DriveCylinderSet,
	"rubber-balloon": client.RubberBalloonApparatus, "balance": client.Balance,
}

func kindWord(k client.EquipmentKind) string { return strings.ReplaceAll(string(k), "_", " ") }

func newEquipment() *cobra.Command {
	var f projectFlags
	c := &cobra.Command{Use: "equipment", Short: "Register equipment with its calibration, list it, log a gauge's daily standard count"}
	f.register(c)

	var kind, model, serial, due string
	add := &cobra.Command{
		Use:   "add",
		Short: "Register a gauge or apparatus with its calibration due date (office, QA)",
		Long: `Register a piece of test equipment. Tests name it by its serial number (or
model and serial). Registering the same serial number again records a
recalibration with its new due date. A test taken after the due date is
flagged for review. Nuclear gauges are licensed radioactive sources: their
use, transport and storage follow the licensee's radiation-safety programme.`,
		Example: `  tamp equipment add --kind nuclear-gauge --model "MD-4" --serial 40417 --calibration-due 2031-11-30`,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			k, ok := equipmentKinds[kind]
			if !ok {
				return failf("--kind %s: must be nuclear-gauge, sand-cone, drive-cylinder, rubber-balloon or balance", quoted(kind))
			}
			if due != "" {
				if err := checkDate("calibration-due", due); err != nil {
					return err
				}
			}
			e := client.Equipment{Kind: k, Model: model, SerialNumber: serial, CalibrationDue: due}
			again := ""
			for _, old := range ss.s.Equipment(ss.project) {
				if old.SerialNumber == serial && old.Kind == k {
					e.ID, again = old.ID, " (recalibrated)"
				}
			}
			id, err := ss.s.RegisterEquipment(cmd.Context(), ss.project, e)
			if err != nil {
				return entryError(cmd, err)
			}
			_, err = fmt.Fprintf(cmd.OutOrStdout(), "%s %s registered%s (%s), calibration due %s\n", kindWord(k), quoted(equipmentName(e)), again,
				words.ShortID(id), orDefault(due, "not given"))
			return err
		},
	}
	fl := add.Flags()
	fl.StringVar(&kind, "kind", "", "nuclear-gauge, sand-cone, drive-cylinder, rubber-balloon or balance")
	fl.StringVar(&model, "model", "", "the model")
	fl.StringVar(&serial, "serial", "", "the serial number, which tests name it by")
	fl.StringVar(&due, "calibration-due", "", "the date its calibration lapses, YYYY-MM-DD")
	_ = add.RegisterFlagCompletionFunc("kind", cobra.FixedCompletions(slices.Sorted(mapKeys(equipmentKinds)), cobra.ShellCompDirectiveNoFileComp))

	var asJSON bool
	list := &cobra.Command{
		Use: "list", Short: "List the project's equipment with calibration and the latest standard count", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			eqs := ss.s.Equipment(ss.project)
			today := time.Now().In(ss.loc).Format(time.DateOnly)
			if asJSON {
				type row struct {
					client.EquipmentRecord
					Name              string `json:"name"`
					CalibrationLapsed bool   `json:"calibration_lapsed"`
				}
				rows := []row{}
				for _, e := range eqs {
					e.Counts = nonNil(e.Counts)
					rows = append(rows, row{EquipmentRecord: e, Name: equipmentName(e.Equipment), CalibrationLapsed: e.CalibrationDue != "" && today > e.CalibrationDue})
				}
				return writeJSON(cmd.OutOrStdout(), rows)
			}
			t := newTable(cmd.OutOrStdout(), "EQUIPMENT", "KIND", "CALIBRATION DUE", "LAST STANDARD COUNT", "ID")
			for _, e := range eqs {
				cal := orDefault(e.CalibrationDue, "-")
				if e.CalibrationDue != "" && today > e.CalibrationDue {
					cal += " LAPSED"
				}
				last := "-"
				if n := len(e.Counts); n > 0 {
					c := e.Counts[n-1]
					last = fmt.Sprintf("%s density %.0f moisture %.0f %s", c.Date, c.DensityCount, c.MoistureCount, acceptedWord(c.Accepted))
				}
				t.row(equipmentName(e.Equipment), kindWord(e.Kind), cal, last, words.ShortID(e.ID))
			}
			return t.flush()
		},
	}
	jsonFlag(list, &asJSON)

	var gauge, date string
	var density, moisture float64
	var rejected bool
	count := &cobra.Command{
		Use:   "count",
		Short: "Log a nuclear gauge's daily standard count (inspectors)",
		Long: `Log the day's standard count of a nuclear gauge, taken on its reference block
as the manufacturer and ASTM D6938 direct. tamp shows each count against the
mean of the gauge's last four accepted counts; whether it is within the
acceptance band is the inspector's call (--rejected records a count that is
not). A gauge test on a day without an accepted count is flagged for review.
Nuclear gauges are licensed radioactive sources: their use, transport and
storage follow the licensee's radiation-safety programme.`,
		Example: `  tamp equipment count --gauge 40417 --density-count 2815 --moisture-count 688`,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			if gauge == "" {
				return failf("--gauge: name the gauge by its serial number (tamp equipment list)")
			}
			e, err := ss.equipment("gauge", gauge)
			if err != nil {
				return err
			}
			if e.Kind != client.NuclearGaugeEquipment {
				return failf("--gauge %s: %s is a %s, not a nuclear gauge", quoted(gauge), quoted(equipmentName(e.Equipment)), kindWord(e.Kind))
			}
			if date == "" {
				date = time.Now().In(ss.loc).Format(time.DateOnly)
			} else if err := checkDate("date", date); err != nil {
				return err
			}
			var prior []client.StandardCount
			for _, c := range e.Counts {
				if c.Accepted {
					prior = append(prior, c)
				}
			}
			if len(prior) > 4 {
				prior = prior[len(prior)-4:]
			}
			if err := ss.s.RecordStandardCount(cmd.Context(), ss.project, client.StandardCount{EquipmentID: e.ID, Date: date,
				DensityCount: density, MoistureCount: moisture, Accepted: !rejected}); err != nil {
				return entryError(cmd, err)
			}
			p := &printer{w: cmd.OutOrStdout()}
			p.f("standard count of gauge %s on %s: density %.0f, moisture %.0f, %s\n", quoted(equipmentName(e.Equipment)), date, density, moisture,
				acceptedWord(!rejected))
			if len(prior) > 0 {
				var d, m float64
				for _, c := range prior {
					d += c.DensityCount / float64(len(prior))
					m += c.MoistureCount / float64(len(prior))
				}
				p.f("  against the mean of the last %d accepted counts: density %+.1f %%, moisture %+.1f %%\n", len(prior),
					(density-d)/d*100, (moisture-m)/m*100)
			} else {
				p.f("  the first accepted count of this gauge on this device: nothing to compare it with\n")
			}
			p.f("%s\n", "Nuclear gauges are licensed radioactive sources: their use, transport and storage follow the licensee's radiation-safety programme.")
			return p.err
		},
	}
	fl = count.Flags()
	fl.StringVar(&gauge, "gauge", "", "the gauge, by serial number")
	fl.StringVar(&date, "date", "", "the day, YYYY-MM-DD (default today in the project's time zone)")
	fl.Float64Var(&density, "density-count", 0, "the density standard count")
	fl.Float64Var(&moisture, "moisture-count", 0, "the moisture standard count")
	fl.BoolVar(&rejected, "rejected", false, "the count is outside the acceptance band: record it as not accepted")
	c.AddCommand(add, list, count)
	return c
}

func acceptedWord(ok bool) string {
	if ok {
		return "accepted"
	}
	return "not accepted"
}

func mapKeys[K comparable, V any](m map[K]V) func(func(K) bool) {
	return func(yield func(K) bool) {
		for k := range m {
			if !yield(k) {
				return
			}
		}
	}
}

func newBorrow() *cobra.Command {
	var f projectFlags
	c := &cobra.Command{Use: "borrow", Short: "Add and list borrow sources with their bank density tests (QA)"}
	f.register(c)

	var name, bank, reference string
	var loose float64
	add := &cobra.Command{
		Use:   "add",
		Short: "Add a borrow source with its in-place (bank) density tests",
		Long: `Add a borrow source with the in-place density tests of its bank, each a wet
density and moisture (--bank-test WET:MOISTURE,..., pcf or kg/m3 and percent).
The mean bank dry density turns compacted volume into the bank volume it took
(tamp qa reconcile). --loose-dry-density, measured in the hauling units,
turns it into loose volume hauled.`,
		Example: `  tamp borrow add --name "Quarry Hill pit" --bank-test 118.5:9.8,120.1:10.4 --loose-dry-density 92.0`,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			if strings.TrimSpace(name) == "" {
				return failf("--name: a borrow source needs a name")
			}
			if bank == "" {
				return failf("--bank-test: give at least one in-place test of the bank, WET:MOISTURE (wet density, moisture %%)")
			}
			pairs, err := parsePairs("bank-test", bank, "WET:MOISTURE")
			if err != nil {
				return err
			}
			b := client.BorrowSource{Name: name, LooseDryDensity: ss.u.toSI(soil.Density, loose)}
			for _, p := range pairs {
				b.BankTests = append(b.BankTests, client.Readings{WetDensity: &client.MeasuredDensity{WetDensity: ss.u.toSI(soil.Density, p[0]), Moisture: p[1]}})
			}
			if reference != "" {
				r, err := ss.reference(reference)
				if err != nil {
					return err
				}
				b.ReferenceID = r.ID
			}
			id, err := ss.s.MeasureBorrowSource(cmd.Context(), ss.project, b)
			if err != nil {
				return entryError(cmd, err)
			}
			for _, br := range ss.s.BorrowSources(ss.project) {
				if br.ID == id {
					_, err = fmt.Fprintf(cmd.OutOrStdout(), "borrow source %s added (%s): bank dry density %s, mean of %d test(s)\n",
						quoted(name), words.ShortID(id), ss.u.show(soil.Density, br.BankDryDensity), len(b.BankTests))
				}
			}
			return err
		},
	}
	fl := add.Flags()
	fl.StringVar(&name, "name", "", "the borrow source's name")
	fl.StringVar(&bank, "bank-test", "", "bank tests WET:MOISTURE,... (wet density pcf or kg/m3, moisture %)")
	fl.Float64Var(&loose, "loose-dry-density", 0, "dry density loose in the hauling units, pcf or kg/m3")
	fl.StringVar(&reference, "reference", "", "the laboratory reference of the material, by name")

	var asJSON bool
	list := &cobra.Command{
		Use: "list", Short: "List the project's borrow sources", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			bs := ss.s.BorrowSources(ss.project)
			if asJSON {
				type row struct {
					ID              string `json:"id"`
					Name            string `json:"name"`
					BankTests       int    `json:"bank_tests"`
					BankDryDensity  num    `json:"bank_dry_density"`
					LooseDryDensity num    `json:"loose_dry_density"`
					Units           string `json:"units"`
				}
				rows := []row{}
				for _, b := range bs {
					loose := ss.u.num(soil.Density, b.LooseDryDensity)
					if b.LooseDryDensity == 0 {
						loose = some(math.NaN(), 0)
					}
					rows = append(rows, row{ID: b.ID, Name: b.Name, BankTests: len(b.BankTests), BankDryDensity: ss.u.num(soil.Density, b.BankDryDensity),
						LooseDryDensity: loose, Units: ss.u.name()})
				}
				return writeJSON(cmd.OutOrStdout(), rows)
			}
			t := newTable(cmd.OutOrStdout(), "BORROW SOURCE", "BANK TESTS", "BANK DRY DENSITY", "LOOSE DRY DENSITY", "ID")
			for _, b := range bs {
				loose := "-"
				if b.LooseDryDensity > 0 {
					loose = ss.u.show(soil.Density, b.LooseDryDensity)
				}
				t.row(b.Name, strconv.Itoa(len(b.BankTests)), ss.u.show(soil.Density, b.BankDryDensity), loose, words.ShortID(b.ID))
			}
			return t.flush()
		},
	}
	jsonFlag(list, &asJSON)
	c.AddCommand(add, list)
	return c
}
