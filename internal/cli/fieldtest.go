package cli

import (
	"errors"
	"fmt"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"

	"tamp/client"
	"tamp/internal/qc"
	"tamp/internal/soil"
	"tamp/internal/words"
)

// methodFlags maps --method's words to the methods.
var methodFlags = map[string]client.Method{
	"nuclear-direct": client.NuclearDirect, "nuclear-backscatter": client.NuclearBackscatter, "sand-cone": client.SandConeMethod,
	"drive-cylinder": client.DriveCylinderMethod, "rubber-balloon": client.RubberBalloonMethod, "wet-density": client.MeasuredWetDensity,
}

// readingFlagsOf lists, per method, the flags that carry its readings, the
// required ones first (those before the "|").
var readingFlagsOf = map[client.Method][]string{
	client.NuclearDirect:       {"wet-density", "water-per-volume", "|", "probe-depth", "oven-moisture"},
	client.NuclearBackscatter:  {"wet-density", "water-per-volume", "|", "oven-moisture"},
	client.SandConeMethod:      {"cone-correction", "sand-density", "soil-mass", "moisture", "|", "sand-used", "initial-mass", "final-mass"},
	client.DriveCylinderMethod: {"cylinder-diameter", "cylinder-length", "soil-mass", "moisture", "|"},
	client.RubberBalloonMethod: {"balloon-initial", "balloon-final", "soil-mass", "moisture", "|"},
	client.MeasuredWetDensity:  {"wet-density", "moisture", "|"},
}

// allReadingFlags are the flags of every method.
var allReadingFlags = []string{"wet-density", "water-per-volume", "probe-depth", "oven-moisture", "sand-used", "initial-mass", "final-mass",
	"cone-correction", "sand-density", "soil-mass", "moisture", "cylinder-diameter", "cylinder-length", "balloon-initial", "balloon-final"}

// readingFlags are a test's readings as typed, in the session's units.
type readingFlags struct {
	method                                     string
	wet, water                                 []float64
	probeDepth, oven                           float64
	sandUsed, initial, final, cone, sandDens   float64
	soilMass, moisture                         float64
	cylDiameter, cylLength, balloonI, balloonF float64
}

func (r *readingFlags) register(fl *pflag.FlagSet) {
	fl.StringVar(&r.method, "method", "", "nuclear-direct, nuclear-backscatter, sand-cone, drive-cylinder, rubber-balloon or wet-density")
	fl.Float64SliceVar(&r.wet, "wet-density", nil, "wet density, pcf or kg/m3 (nuclear: one reading, or two with the gauge turned 90 degrees: 130.2,130.8)")
	fl.Float64SliceVar(&r.water, "water-per-volume", nil, "nuclear: mass of water per unit volume M of each reading, pcf or kg/m3")
	fl.Float64Var(&r.probeDepth, "probe-depth", 0, "nuclear direct transmission: probe depth, in or mm")
	fl.Float64Var(&r.oven, "oven-moisture", 0, "nuclear: an oven-dry moisture of the same material that replaces the gauge's, percent")
	fl.Float64Var(&r.sandUsed, "sand-used", 0, "sand cone: sand that left the apparatus, lb or g (or --initial-mass and --final-mass)")
	fl.Float64Var(&r.initial, "initial-mass", 0, "sand cone: apparatus with sand before the test, lb or g")
	fl.Float64Var(&r.final, "final-mass", 0, "sand cone: apparatus with the sand left after, lb or g")
	fl.Float64Var(&r.cone, "cone-correction", 0, "sand cone: sand that fills the cone and base plate, lb or g")
	fl.Float64Var(&r.sandDens, "sand-density", 0, "sand cone: calibrated bulk density of the sand, pcf or kg/m3")
	fl.Float64Var(&r.soilMass, "soil-mass", 0, "sand cone, drive cylinder, rubber balloon: moist soil from the hole or cylinder, lb or g")
	fl.Float64Var(&r.moisture, "moisture", 0, "moisture content, percent of dry mass")
	fl.Float64Var(&r.cylDiameter, "cylinder-diameter", 0, "drive cylinder: inside diameter, in or mm")
	fl.Float64Var(&r.cylLength, "cylinder-length", 0, "drive cylinder: length of the soil core, in or mm")
	fl.Float64Var(&r.balloonI, "balloon-initial", 0, "rubber balloon: volume reading before the hole is dug, ft3 or cm3")
	fl.Float64Var(&r.balloonF, "balloon-final", 0, "rubber balloon: volume reading with the hole dug, ft3 or cm3")
}

// readings builds a test's readings from the flags set, on top of cur (a
// correction changes only what it is told): with the method of --method,
// or cur's when --method is not given. A flag that does not apply to the
// method, or a required one missing, is an error naming it.
func (r *readingFlags) readings(fl *pflag.FlagSet, u units, cur client.Readings) (client.Readings, error) {
	set := fl.Changed
	m := cur.Method()
	if r.method != "" {
		var ok bool
		if m, ok = methodFlags[r.method]; !ok {
			return cur, failf("--method %s: must be nuclear-direct, nuclear-backscatter, sand-cone, drive-cylinder, rubber-balloon or wet-density", quoted(r.method))
		}
	}
	if m == "" {
		return cur, failf("--method: say how the test was taken: nuclear-direct, nuclear-backscatter, sand-cone, drive-cylinder, rubber-balloon or wet-density")
	}
	if m != cur.Method() {
		cur = client.Readings{}
	}
	own := readingFlagsOf[m]
	for _, name := range allReadingFlags {
		if set(name) && !slices.Contains(own, name) {
			return cur, failf("--%s does not apply to a %s test; its readings are %s", name, words.Method(m), flagList(own))
		}
	}
	if cur.Method() == "" {
		var missing []string
		for _, name := range own {
			if name == "|" {
				break
			}
			if !set(name) {
				missing = append(missing, "--"+name)
			}
		}
		if m == client.SandConeMethod && !set("sand-used") && !(set("initial-mass") && set("final-mass")) {
			missing = append(missing, "--sand-used (or --initial-mass and --final-mass)")
		}
		if len(missing) > 0 {
			return cur, failf("%s: required for a %s test", strings.Join(missing, ", "), words.Method(m))
		}
	}
	d := func(v float64) float64 { return u.toSI(soil.Density, v) }
	mass := func(v float64) float64 { return u.toSI(soil.Mass, v) }
	out := cur
	switch m {
	case client.NuclearDirect, client.NuclearBackscatter:
		n := client.NuclearGauge{Backscatter: m == client.NuclearBackscatter}
		if cur.Nuclear != nil {
			n = *cur.Nuclear
			n.Readings = slices.Clone(n.Readings)
		}
		if set("wet-density") || set("water-per-volume") {
			wet, water := r.wet, r.water
			if !set("wet-density") || !set("water-per-volume") {
				wet, water = nil, nil
				for _, g := range n.Readings {
					wet = append(wet, u.sys.FromSI(soil.Density, g.WetDensity))
					water = append(water, u.sys.FromSI(soil.Density, g.WaterPerVolume))
				}
				if set("wet-density") {
					wet = r.wet
				}
				if set("water-per-volume") {
					water = r.water
				}
			}
			if len(wet) != len(water) || len(wet) < 1 || len(wet) > 2 {
				return cur, failf("--wet-density %s --water-per-volume %s: give one reading, or two (the gauge turned 90 degrees), each a wet density and a water per volume",
					floats(wet), floats(water))
			}
			n.Readings = nil
			for i := range wet {
				n.Readings = append(n.Readings, client.GaugeReading{WetDensity: d(wet[i]), WaterPerVolume: d(water[i])})
			}
		}
		if set("probe-depth") {
			n.ProbeDepth = u.toSI(soil.Depth, r.probeDepth)
		}
		if set("oven-moisture") {
			w := r.oven
			n.OvenMoisture = &w
		}
		out = client.Readings{Nuclear: &n}
	case client.SandConeMethod:
		sc := client.SandCone{}
		if cur.SandCone != nil {
			sc = *cur.SandCone
		}
		if set("sand-used") {
			sc.SandUsed, sc.InitialMass, sc.FinalMass = mass(r.sandUsed), 0, 0
		}
		if set("initial-mass") || set("final-mass") {
			if set("sand-used") {
				return cur, failf("--sand-used, --initial-mass: give the sand used, or the apparatus's masses before and after, not both")
			}
			sc.SandUsed = 0
			if set("initial-mass") {
				sc.InitialMass = mass(r.initial)
			}
			if set("final-mass") {
				sc.FinalMass = mass(r.final)
			}
		}
		if set("cone-correction") {
			sc.ConeCorrection = mass(r.cone)
		}
		if set("sand-density") {
			sc.SandDensity = d(r.sandDens)
		}
		if set("soil-mass") {
			sc.SoilMass = mass(r.soilMass)
		}
		if set("moisture") {
			sc.Moisture = r.moisture
		}
		out = client.Readings{SandCone: &sc}
	case client.DriveCylinderMethod:
		dc := client.DriveCylinder{}
		if cur.DriveCylinder != nil {
			dc = *cur.DriveCylinder
		}
		if set("cylinder-diameter") {
			dc.Diameter = u.toSI(soil.Depth, r.cylDiameter)
		}
		if set("cylinder-length") {
			dc.Length = u.toSI(soil.Depth, r.cylLength)
		}
		if set("soil-mass") {
			dc.SoilMass = mass(r.soilMass)
		}
		if set("moisture") {
			dc.Moisture = r.moisture
		}
		out = client.Readings{DriveCylinder: &dc}
	case client.RubberBalloonMethod:
		rb := client.RubberBalloon{}
		if cur.RubberBalloon != nil {
			rb = *cur.RubberBalloon
		}
		if set("balloon-initial") {
			rb.InitialReading = u.toSI(soil.SmallVolume, r.balloonI)
		}
		if set("balloon-final") {
			rb.FinalReading = u.toSI(soil.SmallVolume, r.balloonF)
		}
		if set("soil-mass") {
			rb.SoilMass = mass(r.soilMass)
		}
		if set("moisture") {
			rb.Moisture = r.moisture
		}
		out = client.Readings{RubberBalloon: &rb}
	case client.MeasuredWetDensity:
		wd := client.MeasuredDensity{}
		if cur.WetDensity != nil {
			wd = *cur.WetDensity
		}
		if set("wet-density") {
			if len(r.wet) != 1 {
				return cur, failf("--wet-density %s: a measured wet density is one value", floats(r.wet))
			}
			wd.WetDensity = d(r.wet[0])
		}
		if set("moisture") {
			wd.Moisture = r.moisture
		}
		out = client.Readings{WetDensity: &wd}
	}
	return out, nil
}

func flagList(names []string) string {
	var out []string
	for _, n := range names {
		if n != "|" {
			out = append(out, "--"+n)
		}
	}
	return strings.Join(out, ", ")
}

func floats(vs []float64) string {
	var s []string
	for _, v := range vs {
		s = append(s, strconv.FormatFloat(v, 'f', -1, 64))
	}
	return orDefault(strings.Join(s, ","), "(none)")
}

// testFields are what a test records besides its readings: where, what,
// and the records it names, as typed.
type testFields struct {
	readingFlags
	station, offset, gps, note                 string
	elevation                                  float64
	feature, placement, spec, reference, gauge string
	lift                                       uint32
	liftThickness                              float64
	remarks                                    string
	overPct, overGs, overW                     float64
}

func (t *testFields) register(fl *pflag.FlagSet) {
	t.readingFlags.register(fl)
	fl.StringVar(&t.station, "station", "", "station along the alignment: 12+34.5 (US, 100 ft), 1+234.5 (SI, 1000 m) or a number of ft or m")
	fl.StringVar(&t.offset, "offset", "", "offset from the alignment, ft or m, with L or R (4.5R) or signed (left negative)")
	fl.Float64Var(&t.elevation, "elevation", 0, "elevation of the test, ft or m (or the depth below the datum where the project records depths)")
	fl.StringVar(&t.gps, "gps", "", "satellite position LAT,LON[,ACCURACY m] (WGS84 degrees)")
	fl.StringVar(&t.note, "location-note", "", "where, in words (\"toe of slope, north side\")")
	fl.StringVar(&t.feature, "feature", "", "the feature tested, e.g. \"embankment\", \"trench backfill\"")
	fl.Uint32Var(&t.lift, "lift", 0, "the lift number")
	fl.Float64Var(&t.liftThickness, "lift-thickness", 0, "the lift's thickness, in or mm (checked against the probe depth)")
	fl.StringVar(&t.placement, "placement", "", "the placement, as \"FEATURE lift N\" or its id (default: the placement of --feature and --lift, if one)")
	fl.StringVar(&t.spec, "spec", "", "the specification graded against, by name")
	fl.StringVar(&t.reference, "reference", "", "the laboratory reference graded against, by lab sample id or material")
	fl.StringVar(&t.gauge, "gauge", "", "the gauge or apparatus used, by serial number")
	fl.StringVar(&t.remarks, "remarks", "", "remarks")
	fl.Float64Var(&t.overPct, "oversize-percent", 0, "oversize: percent of the total dry mass retained on the reference method's sieve")
	fl.Float64Var(&t.overGs, "oversize-gs", 0, "oversize: bulk specific gravity of the oversize particles")
	fl.Float64Var(&t.overW, "oversize-moisture", 0, "oversize: moisture of the oversize particles, percent")
}

// locationFlags are the flags that change a test's location.
var locationFlags = []string{"station", "offset", "elevation", "gps", "location-note"}

// location applies the location flags set onto cur.
func (t *testFields) location(fl *pflag.FlagSet, u units, cur client.Location) (client.Location, error) {
	set := fl.Changed
	var err error
	if set("station") {
		if cur.Station, err = u.parseStation("station", t.station); err != nil {
			return cur, err
		}
	}
	if set("offset") {
		if cur.Offset, err = u.parseOffset("offset", t.offset); err != nil {
			return cur, err
		}
	}
	if set("elevation") {
		cur.Elevation = u.toSI(soil.Length, t.elevation)
	}
	if set("location-note") {
		cur.Description = t.note
	}
	if set("gps") {
		vs, err := parseList("gps", t.gps)
		if err != nil || len(vs) < 2 || len(vs) > 3 {
			return cur, failf("--gps %s: write LAT,LON or LAT,LON,ACCURACY in WGS84 degrees and metres, e.g. 43.6121,-116.3915,3", quoted(t.gps))
		}
		if vs[0] < -90 || vs[0] > 90 || vs[1] < -180 || vs[1] > 180 {
			return cur, failf("--gps %s: latitude must lie in -90..90 and longitude in -180..180 (latitude first)", quoted(t.gps))
		}
		p := client.GeoPosition{Latitude: vs[0], Longitude: vs[1]}
		if len(vs) == 3 {
			p.Accuracy = vs[2]
		}
		cur.Position = &p
	}
	return cur, nil
}

// apply sets onto in the fields whose flags are set, resolving the records
// named by name.
func (t *testFields) apply(fl *pflag.FlagSet, ss *session, in *client.TestInput) error {
	set := fl.Changed
	var err error
	if in.Readings, err = t.readings(fl, ss.u, in.Readings); err != nil {
		return err
	}
	if in.Location, err = t.location(fl, ss.u, in.Location); err != nil {
		return err
	}
	if set("feature") {
		in.Feature = t.feature
	}
	if set("lift") {
		in.LiftNumber = t.lift
	}
	if set("lift-thickness") {
		in.LiftThickness = ss.u.toSI(soil.Depth, t.liftThickness)
	}
	if set("remarks") {
		in.Remarks = t.remarks
	}
	if set("spec") {
		sp, err := ss.spec(t.spec)
		if err != nil {
			return err
		}
		in.SpecID = sp.ID
	}
	if set("reference") {
		r, err := ss.reference(t.reference)
		if err != nil {
			return err
		}
		in.ReferenceID = r.ID
	}
	if set("gauge") {
		e, err := ss.equipment("gauge", t.gauge)
		if err != nil {
			return err
		}
		in.EquipmentID = e.ID
	}
	if set("placement") {
		p, err := ss.placement(t.placement)
		if err != nil {
			return err
		}
		in.PlacementID = p.ID
	}
	if set("oversize-percent") || set("oversize-gs") || set("oversize-moisture") {
		if !set("oversize-percent") || !set("oversize-gs") || !set("oversize-moisture") {
			return failf("--oversize-percent, --oversize-gs, --oversize-moisture: the oversize correction needs all three")
		}
		in.Oversize = &client.Oversize{Percent: t.overPct, BulkSpecificGravity: t.overGs, Moisture: t.overW}
	}
	return nil
}

// placementFor returns the placement of a feature and lift, when the
// device holds exactly one.
func (ss *session) placementFor(feature string, lift uint32) (client.Placement, bool) {
	var found []client.Placement
	for _, p := range ss.s.Placements(ss.project) {
		if strings.EqualFold(p.Feature, feature) && p.LiftNumber == lift {
			found = append(found, p)
		}
	}
	if len(found) != 1 {
		return client.Placement{}, false
	}
	return found[0], true
}

// test finds a test by its short id (the last characters of its id) or its
// id.
func (ss *session) test(given string) (client.Test, error) {
	g := strings.ToLower(strings.TrimSpace(given))
	if g == "" {
		return client.Test{}, failf("name the test by the short id tamp printed (tamp test today lists them), or \"last\" for the one you took last")
	}
	var found []client.Test
	tests := ss.s.Tests(ss.project)
	if g == "last" { // the test this device's user took last
		for i := len(tests) - 1; i >= 0; i-- {
			if tests[i].Author == ss.s.User() {
				return tests[i], nil
			}
		}
		return client.Test{}, failf("test last: you have recorded no test in project %s on this device", quoted(ss.projectName()))
	}
	for _, t := range tests {
		if t.ID == g {
			return t, nil
		}
		if len(g) >= 4 && strings.HasSuffix(t.ID, g) {
			found = append(found, t)
		}
	}
	switch len(found) {
	case 1:
		return found[0], nil
	case 0:
		return client.Test{}, failf("test %s: no test of project %s on this device ends with that id; tamp test today lists today's tests (sync to get others')",
			quoted(given), quoted(ss.projectName()))
	}
	var ids []string
	for _, t := range found {
		ids = append(ids, t.ID)
	}
	return client.Test{}, failf("test %s: %d tests match; give more of the id: %s", quoted(given), len(found), strings.Join(ids, ", "))
}

// testLabel names a test for people: its short id, where and what.
func (ss *session) testLabel(id string, c client.TestInput) string {
	parts := []string{words.ShortID(id)}
	if c.Location.Station != 0 || c.Location.Offset != 0 {
		parts = append(parts, "at "+ss.u.station(c.Location.Station))
		if c.Location.Offset != 0 {
			parts = append(parts, ss.u.offset(c.Location.Offset))
		}
	}
	if c.Feature != "" {
		parts = append(parts, escape(c.Feature))
	}
	if c.LiftNumber != 0 {
		parts = append(parts, "lift "+strconv.Itoa(int(c.LiftNumber)))
	}
	return strings.Join(parts, ", ")
}

// recordedJSON is a test's result as --json prints it when recorded.
type recordedJSON struct {
	TestID   string           `json:"test_id"`
	ShortID  string           `json:"short_id"`
	RetestOf string           `json:"retest_of,omitempty"`
	Result   resultJSON       `json:"result"`
	Steps    []stepOut        `json:"steps"`
	Flags    []client.Finding `json:"flags"`
	Missing  []string         `json:"missing"`
	Cautions []string         `json:"cautions"`
}

// printRecorded prints a result just recorded, as text or JSON.
func (ss *session) printRecorded(cmd *cobra.Command, asJSON bool, c client.TestInput, r client.TestResult, retestOf string) error {
	if asJSON {
		out := recordedJSON{TestID: r.TestID, ShortID: words.ShortID(r.TestID), RetestOf: retestOf, Result: resultOut(ss.u, r.Result),
			Flags: nonNil(r.Flags), Missing: nonNil(r.Missing), Cautions: cautionsFor(r.Result.Method), Steps: []stepOut{}}
		for _, s := range r.Steps {
			q := quantityOf[s.Quantity]
			out.Steps = append(out.Steps, stepOut{Name: s.Name, Value: ss.u.num(q, s.Value), Unit: ss.u.unit(q)})
		}
		return writeJSON(cmd.OutOrStdout(), out)
	}
	label := ss.testLabel(r.TestID, c)
	if retestOf != "" {
		label += " (retest of " + words.ShortID(retestOf) + ")"
	}
	if err := printResult(cmd.OutOrStdout(), ss.u, label, r); err != nil {
		return err
	}
	if r.Result.Verdict == client.Fail {
		_, err := fmt.Fprintf(cmd.OutOrStdout(), "\nThe area needs rework and a retest: tamp test retest %s with the new readings once it is reworked.\n", words.ShortID(r.TestID))
		return err
	}
	return nil
}

// testError explains the store's refusals of a change to a test.
func (ss *session) testError(cmd *cobra.Command, t client.Test, err error) error {
	switch {
	case errors.Is(err, client.ErrReasonRequired):
		return failf("--reason: say why, in words; the reason stays in the test's history")
	case errors.Is(err, client.ErrNotAuthor):
		return failf("test %s was recorded by %s: only they may correct or void it; ask them, or record a new test", words.ShortID(t.ID), escape(ss.who(t.Author)))
	case errors.Is(err, client.ErrVoided):
		return failf("test %s was voided; it stays in the record as voided. Record a new test instead", words.ShortID(t.ID))
	case errors.Is(err, client.ErrNotFailing):
		return failf("test %s did not fail (%s): only a failing test is retested; to check the area again, record a new test (tamp test record)",
			words.ShortID(t.ID), verdictWord(t.Result.Verdict))
	case errors.Is(err, client.ErrOwnTest):
		return failf("test %s was recorded by you: someone else in the office or QA decides on it", words.ShortID(t.ID))
	}
	return entryError(cmd, err)
}

func newTest() *cobra.Command {
	var f projectFlags
	c := &cobra.Command{
		Use:   "test",
		Short: "Record, correct, void and retest in-place density tests; list today's tests and open failures",
		Long: `Record in-place density tests offline and see the result at once: dry density,
moisture, relative compaction against the spec's minimum, moisture against its
window, the verdict and the flags for review. Values are typed and shown in
the project's units (or --units). A test is named by the short id tamp prints
(the last characters of its id), or "last" for the test you took last.

Nuclear gauges are licensed radioactive sources: their use, transport and
storage follow the licensee's radiation-safety programme. Results support,
and never replace, review by qualified personnel; the project's
specifications and local codes govern every acceptance limit.`,
	}
	f.register(c)

	var rec testFields
	var recJSON bool
	record := &cobra.Command{
		Use:   "record",
		Short: "Record a test by its method and see its result at once",
		Long: `Record an in-place density test and print its result, the steps of the
arithmetic, the limits applied and the flags. It needs no signal: the test
is kept on this device and goes to the server with the next tamp sync.

--method and its readings (masses lb or g, densities pcf or kg/m3, depths and
cylinder sizes in or mm, balloon readings ft3 or cm3):
  nuclear-direct       --wet-density --water-per-volume [--probe-depth] [--oven-moisture]
  nuclear-backscatter  --wet-density --water-per-volume [--oven-moisture]
                       (one reading, or two with the gauge turned 90 degrees: 130.2,130.8)
  sand-cone            --sand-used (or --initial-mass --final-mass) --cone-correction
                       --sand-density --soil-mass --moisture
  drive-cylinder       --cylinder-diameter --cylinder-length --soil-mass --moisture
  rubber-balloon       --balloon-initial --balloon-final --soil-mass --moisture
  wet-density          --wet-density --moisture (measured by other means)

Name the --spec, --reference and --gauge by name; without a spec and a
reference the test is computed but not graded. The test joins the placement
of its --feature and --lift when the device holds one.`,
		Example: `  tamp test record --method sand-cone --sand-used 7.00 --cone-correction 0.53 --sand-density 99.0 \
      --soil-mass 8.11 --moisture 11.1 --station 12+40 --offset 6R --feature embankment --lift 4 \
      --spec embankment --reference L-12 --gauge SC-2
  tamp test record --method nuclear-direct --wet-density 131.2,130.6 --water-per-volume 14.1,14.3 \
      --probe-depth 8 --station 13+05 --offset 2L --feature embankment --lift 4 \
      --spec embankment --reference L-12 --gauge 40417`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			fl := cmd.Flags()
			if !fl.Changed("station") && !fl.Changed("gps") && !fl.Changed("location-note") {
				return failf("--station: say where the test was taken (--station, with --offset; or --gps; or --location-note)")
			}
			in := client.TestInput{Project: ss.project}
			if err := rec.apply(fl, ss, &in); err != nil {
				return err
			}
			if in.PlacementID == "" && in.Feature != "" {
				if p, ok := ss.placementFor(in.Feature, in.LiftNumber); ok {
					in.PlacementID = p.ID
				}
			}
			r, err := ss.s.RecordTest(cmd.Context(), in)
			if err != nil {
				return entryError(cmd, err)
			}
			return ss.printRecorded(cmd, recJSON, in, r, "")
		},
	}
	rec.register(record.Flags())
	record.Flags().BoolVar(&recJSON, "json", false, "print the result as JSON")
	_ = record.RegisterFlagCompletionFunc("method", cobra.FixedCompletions(slices.Sorted(mapKeys(methodFlags)), cobra.ShellCompDirectiveNoFileComp))

	var cor testFields
	var corReason string
	var corJSON bool
	correct := &cobra.Command{
		Use:   "correct TEST --reason WHY [flags to change]",
		Short: "Correct a test you recorded: a new revision with its reason; the first stays in history",
		Long: `Correct a test you recorded: give the flags to change (as tamp test record takes
them) and --reason. Only what you give changes; the result is graded again
and printed. The earlier revision stays in the test's history.`,
		Example: `  tamp test correct 9f3c2a1b --soil-mass 8.21 --reason "soil mass misread from the scale"`,
		Args:    cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			t, err := ss.test(args[0])
			if err != nil {
				return err
			}
			if strings.TrimSpace(corReason) == "" {
				return failf("--reason: say why the test is corrected; the reason stays in its history")
			}
			// The changes are resolved here, not in the edit function, which
			// runs with the store locked.
			content := t.Content
			if err := cor.apply(cmd.Flags(), ss, &content); err != nil {
				return err
			}
			r, err := ss.s.CorrectTest(cmd.Context(), ss.project, t.ID, corReason, func(in *client.TestInput) { *in = content })
			if err != nil {
				return ss.testError(cmd, t, err)
			}
			return ss.printRecorded(cmd, corJSON, content, r, t.RetestOf)
		},
	}
	cor.register(correct.Flags())
	correct.Flags().StringVar(&corReason, "reason", "", "why the test is corrected (required)")
	correct.Flags().BoolVar(&corJSON, "json", false, "print the result as JSON")

	var voidReason string
	void := &cobra.Command{
		Use:     "void TEST --reason WHY",
		Short:   "Void a test you recorded, with the reason; it stays in the record as voided",
		Example: `  tamp test void 9f3c2a1b --reason "tested the haul road, not the embankment"`,
		Args:    cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			t, err := ss.test(args[0])
			if err != nil {
				return err
			}
			if strings.TrimSpace(voidReason) == "" {
				return failf("--reason: say why the test is voided; the reason stays in its history")
			}
			if err := ss.s.VoidTest(cmd.Context(), ss.project, t.ID, voidReason); err != nil {
				return ss.testError(cmd, t, err)
			}
			msg := ""
			if t.Result.Verdict == client.Fail {
				msg = "\nA voided failure is listed for QA in tamp qa audit."
			}
			_, err = fmt.Fprintf(cmd.OutOrStdout(), "test %s voided: %s%s\n", ss.testLabel(t.ID, t.Content), escape(voidReason), msg)
			return err
		},
	}
	void.Flags().StringVar(&voidReason, "reason", "", "why the test is voided (required)")

	var ret testFields
	var retJSON bool
	retest := &cobra.Command{
		Use:   "retest TEST [--method ...] readings [location]",
		Short: "Retest a failing test after rework; place, lift, spec and reference follow the original",
		Long: `Record a retest of a failing test once the area is reworked. The retest takes
the original's location, feature, lift, placement, spec, reference and gauge
unless told otherwise; give the readings as tamp test record takes them (the
method is the original's unless --method names another). A passing retest
closes the failure.`,
		Example: `  tamp test retest 9f3c2a1b --wet-density 133.0,132.4 --water-per-volume 13.2,13.4 --probe-depth 8`,
		Args:    cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			t, err := ss.test(args[0])
			if err != nil {
				return err
			}
			fl := cmd.Flags()
			for _, name := range []string{"feature", "lift", "placement", "spec", "reference", "lift-thickness", "oversize-percent", "oversize-gs", "oversize-moisture"} {
				if fl.Changed(name) {
					return failf("--%s: a retest keeps the original's %s; record a new test (tamp test record) to test something else", name, name)
				}
			}
			in := client.RetestInput{Remarks: ret.remarks}
			if ret.method == "" { // the original's method, with all of its readings anew
				for word, m := range methodFlags {
					if m == t.Result.Method {
						ret.method = word
					}
				}
			}
			if in.Readings, err = ret.readings(fl, ss.u, client.Readings{}); err != nil {
				return err
			}
			if slices.ContainsFunc(locationFlags, fl.Changed) {
				loc, err := ret.location(fl, ss.u, t.Content.Location)
				if err != nil {
					return err
				}
				in.Location = &loc
			}
			if fl.Changed("gauge") {
				e, err := ss.equipment("gauge", ret.gauge)
				if err != nil {
					return err
				}
				in.EquipmentID = e.ID
			}
			r, err := ss.s.RecordRetest(cmd.Context(), ss.project, t.ID, in)
			if err != nil {
				return ss.testError(cmd, t, err)
			}
			content := t.Content
			if in.Location != nil {
				content.Location = *in.Location
			}
			return ss.printRecorded(cmd, retJSON, content, r, t.ID)
		},
	}
	ret.register(retest.Flags())
	retest.Flags().BoolVar(&retJSON, "json", false, "print the result as JSON")

	var showJSON, idOnly bool
	show := &cobra.Command{
		Use: "show TEST", Short: "Show a test with its whole history: revisions, voids, reviews, retests, flags", Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			t, err := ss.test(args[0])
			if err != nil {
				return err
			}
			if idOnly { // for scripts: TEST=$(tamp test show last --id-only)
				_, err := fmt.Fprintln(cmd.OutOrStdout(), words.ShortID(t.ID))
				return err
			}
			if showJSON {
				return writeJSON(cmd.OutOrStdout(), ss.testOut(t))
			}
			return ss.printTest(cmd, t)
		},
	}
	jsonFlag(show, &showJSON)
	show.Flags().BoolVar(&idOnly, "id-only", false, "print only the test's short id, for scripts")

	var day string
	var todayJSON bool
	today := &cobra.Command{
		Use: "today", Short: "List the tests taken today (or --day), in the order taken", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			var ts []client.Test
			if day == "" {
				ts = ss.s.Today(ss.project)
				day = time.Now().In(ss.loc).Format(time.DateOnly)
			} else {
				if err := checkDate("day", day); err != nil {
					return err
				}
				ts = ss.s.TestsOn(ss.project, day)
			}
			return ss.printTests(cmd, todayJSON, ts, fmt.Sprintf("No tests taken on %s in project %s on this device.", day, quoted(ss.projectName())))
		},
	}
	today.Flags().StringVar(&day, "day", "", "another day, YYYY-MM-DD (in the project's time zone)")
	jsonFlag(today, &todayJSON)

	var failJSON bool
	failures := &cobra.Command{
		Use: "failures", Short: "List the failing tests that still need a retest", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			return ss.printTests(cmd, failJSON, ss.s.OpenFailures(ss.project), "No open failures: every failing test has a passing retest, an accepted exception or was voided.")
		},
	}
	jsonFlag(failures, &failJSON)

	c.AddCommand(record, correct, void, retest, show, today, failures)
	return c
}

// testJSON is a test as --json prints it: names beside ids, values in the
// units shown.
type testJSON struct {
	ID           string              `json:"id"`
	ShortID      string              `json:"short_id"`
	Project      string              `json:"project"`
	Taken        time.Time           `json:"taken"`
	Day          string              `json:"day"`
	RecordedBy   string              `json:"recorded_by"`
	Units        string              `json:"units"`
	Station      num                 `json:"station"`
	StationText  string              `json:"station_text"`
	Offset       num                 `json:"offset"`
	Elevation    num                 `json:"elevation"`
	Position     *client.GeoPosition `json:"position,omitempty"`
	Feature      string              `json:"feature"`
	Lift         uint32              `json:"lift"`
	Placement    string              `json:"placement"`
	Spec         string              `json:"spec"`
	Reference    string              `json:"reference"`
	Equipment    string              `json:"equipment"`
	Remarks      string              `json:"remarks"`
	Result       resultJSON          `json:"result"`
	ReviewStatus client.ReviewStatus `json:"review_status"`
	Voided       bool                `json:"voided"`
	RetestOf     string              `json:"retest_of"`
	Retests      []string            `json:"retests"`
	Flags        []client.Finding    `json:"flags"`
	History      []historyJSON       `json:"history"`
}

type historyJSON struct {
	Time   time.Time `json:"time"`
	By     string    `json:"by"`
	Entry  string    `json:"entry"` // recorded, corrected, voided, approved, returned, exception accepted
	Reason string    `json:"reason"`
}

func (ss *session) testOut(t client.Test) testJSON {
	c := t.Content
	out := testJSON{ID: t.ID, ShortID: words.ShortID(t.ID), Project: ss.projectName(), Taken: t.Taken, Day: t.Day, RecordedBy: ss.who(t.Author),
		Units: ss.u.name(), Station: ss.u.num(soil.Length, c.Location.Station), StationText: ss.u.station(c.Location.Station),
		Offset: ss.u.num(soil.Length, c.Location.Offset), Elevation: ss.u.num(soil.Length, c.Location.Elevation), Position: c.Location.Position,
		Feature: c.Feature, Lift: c.LiftNumber, Remarks: c.Remarks, Result: resultOut(ss.u, t.Result), ReviewStatus: t.ReviewStatus,
		Voided: t.Voided, Flags: nonNil(append(append([]client.Finding(nil), t.Result.Flags...), t.Flags...)), Retests: []string{},
		History: ss.history(t)}
	out.Spec, out.Reference, out.Equipment, out.Placement = ss.names(c)
	if t.RetestOf != "" {
		out.RetestOf = words.ShortID(t.RetestOf)
	}
	for _, r := range t.Retests {
		out.Retests = append(out.Retests, words.ShortID(r))
	}
	return out
}

// names returns the names of the spec, reference, equipment and placement
// a test names ("" for none; the id's end when the device lacks it).
func (ss *session) names(c client.TestInput) (spec, ref, eq, place string) {
	missing := func(id string) string {
		if id == "" {
			return ""
		}
		return "(not on this device: " + words.ShortID(id) + ")"
	}
	spec, ref, eq, place = missing(c.SpecID), missing(c.ReferenceID), missing(c.EquipmentID), missing(c.PlacementID)
	for _, s := range ss.s.Specs(ss.project) {
		if s.ID == c.SpecID {
			spec = s.Name
		}
	}
	for _, r := range ss.s.References(ss.project) {
		if r.ID == c.ReferenceID {
			ref = referenceName(r)
		}
	}
	for _, e := range ss.s.Equipment(ss.project) {
		if e.ID == c.EquipmentID {
			eq = equipmentName(e.Equipment)
		}
	}
	for _, p := range ss.s.Placements(ss.project) {
		if p.ID == c.PlacementID {
			place = placementName(p)
		}
	}
	return spec, ref, eq, place
}

// history lists a test's entries in time order.
func (ss *session) history(t client.Test) []historyJSON {
	var h []historyJSON
	for i, r := range t.Revisions {
		what := "corrected"
		if i == 0 || r.Supersedes == "" {
			what = "recorded"
		}
		h = append(h, historyJSON{Time: r.Time, By: ss.who(r.Author), Entry: what, Reason: r.Reason})
	}
	for _, v := range t.Voids {
		h = append(h, historyJSON{By: ss.who(v.Author), Entry: "voided", Reason: v.Reason})
	}
	for _, r := range t.Reviews {
		what := "approved"
		if r.Decision == client.Return {
			what = "returned"
		}
		h = append(h, historyJSON{Time: r.Time, By: ss.who(r.Author), Entry: what, Reason: r.Comment})
	}
	for _, x := range t.Exceptions {
		h = append(h, historyJSON{By: ss.who(x.Author), Entry: "exception accepted", Reason: x.Reason})
	}
	slices.SortStableFunc(h, func(a, b historyJSON) int {
		switch {
		case a.Time.IsZero() || b.Time.IsZero():
			return 0
		}
		return a.Time.Compare(b.Time)
	})
	if h == nil {
		h = []historyJSON{}
	}
	return h
}

// printTest writes a test with its history.
func (ss *session) printTest(cmd *cobra.Command, t client.Test) error {
	w := cmd.OutOrStdout()
	p := &printer{w: w}
	c := t.Content
	state := ""
	if t.Voided {
		state = " (VOIDED)"
	}
	p.f("Test %s%s: %s, project %s\n", words.ShortID(t.ID), state, words.Method(t.Result.Method), quoted(ss.projectName()))
	p.f("  %-28s %s by %s (id %s)\n", "taken", localTime(t.Taken, ss.loc), escape(ss.who(t.Author)), t.ID)
	loc := ss.u.station(c.Location.Station) + ", offset " + ss.u.offset(c.Location.Offset)
	if c.Location.Elevation != 0 {
		loc += ", elevation " + ss.u.show(soil.Length, c.Location.Elevation)
	}
	if pos := c.Location.Position; pos != nil {
		loc += fmt.Sprintf(", GPS %.6f, %.6f", pos.Latitude, pos.Longitude)
	}
	if c.Location.Description != "" {
		loc += " (" + escape(c.Location.Description) + ")"
	}
	p.f("  %-28s %s\n", "station", loc)
	spec, ref, eq, place := ss.names(c)
	p.f("  %-28s %s, lift %d%s\n", "feature", orDefault(escape(c.Feature), "-"), c.LiftNumber, orDefault(prefix(", placement ", escape(place)), ""))
	p.f("  %-28s spec %s, reference %s, equipment %s\n", "graded against", orDefault(quotedOr(spec), "-"), orDefault(quotedOr(ref), "-"),
		orDefault(quotedOr(eq), "-"))
	if c.Remarks != "" {
		p.f("  %-28s %s\n", "remarks", escape(c.Remarks))
	}
	printGrade(p, ss.u, t.Result)
	p.f("Review: %s\n", t.ReviewStatus)
	if t.RetestOf != "" {
		p.f("Retest of %s\n", words.ShortID(t.RetestOf))
	}
	if len(t.Retests) > 0 {
		var ids []string
		for _, r := range t.Retests {
			ids = append(ids, words.ShortID(r))
		}
		p.f("Retested by %s\n", strings.Join(ids, ", "))
	}
	if t.ExceptionAccepted {
		p.f("QA accepted the current revision as it stands.\n")
	}
	printFindings(p, "For review (flags do not change the verdict):", append(append([]client.Finding(nil), t.Result.Flags...), t.Flags...))
	if p.err != nil {
		return p.err
	}
	p.f("History:\n")
	tab := newTable(w, "  WHEN", "WHO", "ENTRY", "REASON OR COMMENT")
	for _, h := range ss.history(t) {
		tab.row("  "+localTime(h.Time, ss.loc), h.By, h.Entry, h.Reason)
	}
	if p.err == nil {
		p.err = tab.flush()
	}
	p.f("\n%s\n", qc.RoundingNote)
	for _, ct := range cautionsFor(t.Result.Method) {
		p.f("%s\n", ct)
	}
	return p.err
}

func prefix(p, s string) string {
	if s == "" {
		return ""
	}
	return p + s
}

func quotedOr(s string) string {
	if s == "" {
		return ""
	}
	return quoted(s)
}

// printTests writes a list of tests as a table (or JSON), or empty when
// there are none.
func (ss *session) printTests(cmd *cobra.Command, asJSON bool, ts []client.Test, empty string) error {
	if asJSON {
		out := []testJSON{}
		for _, t := range ts {
			out = append(out, ss.testOut(t))
		}
		return writeJSON(cmd.OutOrStdout(), out)
	}
	w := cmd.OutOrStdout()
	if len(ts) == 0 {
		_, err := fmt.Fprintln(w, empty)
		return err
	}
	p := &printer{w: w}
	p.f("Project %s, %s units\n", quoted(ss.projectName()), ss.u.name())
	tab := newTable(w, "TIME", "TEST", "STATION", "OFFSET", "FEATURE", "LIFT", "METHOD", "DRY DENSITY", "MOISTURE", "RC", "LIMIT", "VERDICT", "REVIEW", "BY")
	for _, t := range ts {
		res := t.Result
		rc, verdict := "-", verdictWhy(res)
		if graded(res) {
			rc = ss.u.show(soil.Percent, res.RelativeCompaction)
		}
		if t.Voided {
			verdict = "voided"
		}
		id := words.ShortID(t.ID)
		if t.RetestOf != "" {
			id += " (retest of " + words.ShortID(t.RetestOf) + ")"
		}
		tab.row(t.Taken.In(ss.loc).Format("15:04"), id, ss.u.station(t.Content.Location.Station), ss.u.offset(t.Content.Location.Offset),
			t.Content.Feature, strconv.Itoa(int(t.Content.LiftNumber)), methodShort[res.Method], ss.u.show(soil.Density, res.DryDensity),
			ss.u.show(soil.Percent, res.Moisture), rc, orDefault(words.CompactionLimit(res.Limits), "-"), verdict, string(t.ReviewStatus), ss.who(t.Author))
	}
	if p.err == nil {
		p.err = tab.flush()
	}
	if anyNuclear(ts) {
		p.f("%s\n", qc.NuclearCaution)
	}
	p.f("%s\n", qc.Caution)
	return p.err
}
