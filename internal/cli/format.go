package cli

import (
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	"tamp/client"
	"tamp/internal/qc"
	"tamp/internal/soil"
	"tamp/internal/words"
)

// format.go holds the printing helpers the project commands share (and
// tamp demo calls): aligned tables, values in a unit system at the
// resolution the test methods report, stations and offsets in the trade's
// notation, verdicts as words, short test ids and the cautions. Values
// arrive in SI, as package client keeps them, and are converted here.

// shownError is an error whose text tamp composed for people, a line
// each for what was wrong (with which value) and what to do, with every
// name or value anyone typed or chose escaped in it (quoted, escape): plain
// prints it as it is, over several lines.
type shownError struct{ msg string }

func (e *shownError) Error() string { return e.msg }

// failf returns a shownError of the text fmt.Sprintf makes.
func failf(format string, args ...any) error { return &shownError{msg: fmt.Sprintf(format, args...)} }

// table writes rows aligned in columns (text/tabwriter). Every cell is
// escaped (see escape), so a name with a tab or a newline cannot shift a
// column or forge a row: pass raw text.
type table struct {
	tw *tabwriter.Writer
}

// newTable starts a table on w with a header row.
func newTable(w io.Writer, header ...string) *table {
	t := &table{tw: tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)}
	t.row(header...)
	return t
}

// row adds a row of cells.
func (t *table) row(cells ...string) {
	for i, c := range cells {
		if i > 0 {
			io.WriteString(t.tw, "\t")
		}
		io.WriteString(t.tw, escape(c))
	}
	io.WriteString(t.tw, "\n")
}

// flush writes the table and returns the first write error.
func (t *table) flush() error { return t.tw.Flush() }

// units shows SI values in a unit system, at the resolution tamp reports
// each quantity at (soil.System.Places): dry density to 0.1 pcf or
// 1 kg/m3, moisture and relative compaction to 0.1 %.
type units struct{ sys soil.System }

// unitsOf returns the units of a project's set-up, or of --units when
// given (us or si), SI when neither says.
func unitsOf(flag string, su client.ProjectSetUp) (units, error) {
	if flag != "" {
		sys, err := soil.ParseSystem(flag)
		if err != nil {
			return units{}, failf("--units %s: must be us (pcf, lb, ft, yd3) or si (kg/m3, g, m, m3)", quoted(flag))
		}
		return units{sys}, nil
	}
	if su.Units == client.USCustomary {
		return units{soil.US}, nil
	}
	return units{soil.SI}, nil
}

// quantityOf maps client's quantities to the unit table's.
var quantityOf = map[client.Quantity]soil.Quantity{client.DensityQuantity: soil.Density, client.MassQuantity: soil.Mass,
	client.SmallVolumeQuantity: soil.SmallVolume, client.VolumeQuantity: soil.Volume, client.LengthQuantity: soil.Length,
	client.DepthQuantity: soil.Depth, client.PercentQuantity: soil.Percent, client.RatioQuantity: soil.Ratio}

// num returns v (SI) in q's unit at q's resolution.
func (u units) num(q soil.Quantity, v float64) num {
	return some(u.sys.FromSI(q, v), u.sys.Places(q))
}

// show returns v (SI) in q's unit at q's resolution, with the unit.
func (u units) show(q soil.Quantity, v float64) string {
	s := u.num(q, v).String()
	if unit := u.sys.Unit(q); unit != "" {
		if unit == "%" {
			return s + " %"
		}
		return s + " " + unit
	}
	return s
}

// unit names q's unit.
func (u units) unit(q soil.Quantity) string { return u.sys.Unit(q) }

// toSI converts v, typed in q's unit, to SI.
func (u units) toSI(q soil.Quantity, v float64) float64 { return u.sys.ToSI(q, v) }

// area shows an area (m2) in ft2 or m2, to 1 place.
func (u units) area(v float64) string {
	f := u.sys.FromSI(soil.Length, 1)
	return some(v*f*f, 1).String() + " " + u.unit(soil.Length) + "2"
}

// areaToSI converts an area typed in ft2 or m2 to m2.
func (u units) areaToSI(v float64) float64 {
	m := u.sys.ToSI(soil.Length, 1)
	return v * m * m
}

// name is "us" or "si".
func (u units) name() string { return u.sys.String() }

// station writes a station (SI metres along the alignment) in the trade's
// notation: hundreds of feet (12+34.50) in US units, kilometres (1+234.50)
// in SI.
func (u units) station(m float64) string { return u.sys.Station(m) }

// parseStation reads a station as typed, in the project's length unit: in
// the trade's notation (12+34.5 is 1234.5 ft in US units, 1+234.5 is
// 1234.5 m in SI) or as a plain number. It returns metres.
func (u units) parseStation(flag, s string) (float64, error) {
	t := strings.TrimSpace(s)
	sign := 1.0
	if strings.HasPrefix(t, "-") {
		sign, t = -1, t[1:]
	}
	var v float64
	if whole, rest, ok := strings.Cut(t, "+"); ok {
		w, err1 := strconv.ParseUint(whole, 10, 32)
		r, err2 := strconv.ParseFloat(rest, 64)
		step := 100.0
		if u.sys == soil.SI {
			step = 1000
		}
		if err1 != nil || err2 != nil || r < 0 || r >= step || strings.ContainsAny(rest, "+-eE") {
			return 0, failf("--%s %s: write a station as 12+34.5 (US, 100 ft stations), 1+234.5 (SI, 1000 m) or a plain number of %s",
				flag, quoted(s), u.unit(soil.Length))
		}
		v = float64(w)*step + r
	} else {
		f, err := strconv.ParseFloat(t, 64)
		if err != nil || math.IsNaN(f) || math.IsInf(f, 0) {
			return 0, failf("--%s %s: write a station as 12+34.5 (US, 100 ft stations), 1+234.5 (SI, 1000 m) or a plain number of %s",
				flag, quoted(s), u.unit(soil.Length))
		}
		v = f
	}
	return u.toSI(soil.Length, sign*v), nil
}

// offset writes an offset from the alignment (SI metres, negative to the
// left) as a distance with L or R: "4.50 ft R".
func (u units) offset(m float64) string {
	side := " R"
	if m < 0 {
		side, m = " L", -m
	}
	if m == 0 {
		side = ""
	}
	return u.show(soil.Length, m) + side
}

// parseOffset reads an offset typed as a number of ft or m, with an
// optional L or R (left negative): "4.5R", "4.5 L", "-4.5". It returns
// metres.
func (u units) parseOffset(flag, s string) (float64, error) {
	t := strings.ToUpper(strings.TrimSpace(s))
	sign := 1.0
	switch {
	case strings.HasSuffix(t, "L"):
		sign, t = -1, strings.TrimSpace(strings.TrimSuffix(t, "L"))
	case strings.HasSuffix(t, "R"):
		t = strings.TrimSpace(strings.TrimSuffix(t, "R"))
	}
	f, err := strconv.ParseFloat(t, 64)
	if err != nil || math.IsNaN(f) || math.IsInf(f, 0) || sign < 0 && f < 0 {
		return 0, failf("--%s %s: write an offset as a distance in %s with L or R (4.5L, 4.5R) or a signed number (left negative)",
			flag, quoted(s), u.unit(soil.Length))
	}
	return u.toSI(soil.Length, sign*f), nil
}

// verdictWord is a verdict in words: PASS, FAIL, or "not graded" while the
// test's reference or spec has not reached the device.
func verdictWord(v client.Verdict) string {
	switch v {
	case client.Pass:
		return "PASS"
	case client.Fail:
		return "FAIL"
	}
	return "not graded"
}

// verdictWhy is a verdict in words, with the reasons of a failure in the
// trade's words: FAIL: under-compacted, too dry, too wet.
func verdictWhy(r client.Result) string {
	if r.Verdict != client.Fail {
		return verdictWord(r.Verdict)
	}
	var why []string
	for _, f := range r.Reasons {
		switch f.Code {
		case client.ReasonCompactionBelowMinimum:
			why = append(why, "under-compacted")
		case client.ReasonMoistureBelowWindow:
			why = append(why, "too dry")
		case client.ReasonMoistureAboveWindow:
			why = append(why, "too wet")
		default:
			why = append(why, f.Code)
		}
	}
	if len(why) == 0 {
		return verdictWord(r.Verdict)
	}
	return verdictWord(r.Verdict) + ": " + strings.Join(why, ", ")
}

// anyNuclear reports whether any of the tests was taken with a nuclear
// gauge, whose caution then goes with the list.
func anyNuclear(ts []client.Test) bool {
	for _, t := range ts {
		if t.Result.Method == client.NuclearDirect || t.Result.Method == client.NuclearBackscatter {
			return true
		}
	}
	return false
}

// methodShort are the methods in a word or two, for tables.
var methodShort = map[client.Method]string{
	client.NuclearDirect: "nuclear DT", client.NuclearBackscatter: "nuclear BS", client.SandConeMethod: "sand cone",
	client.DriveCylinderMethod: "drive cyl.", client.RubberBalloonMethod: "balloon", client.MeasuredWetDensity: "wet density",
}

// moistureValue is a test's moisture against optimum on its spec's basis:
// "+0.5 points" or "104.2 % of optimum".
func moistureValue(r client.Result) string {
	if r.Limits.MoistureBasis == client.PercentOfOptimum {
		return some(r.MoisturePercentOfOptimum, 1).String() + " % of optimum"
	}
	return fmt.Sprintf("%+.1f points", roundHalfAway(r.MoistureDeviation, 1))
}

// graded reports whether r carries a grade against a reference.
func graded(r client.Result) bool { return r.Verdict == client.Pass || r.Verdict == client.Fail }

// cautionsFor returns the cautions a result is shown with: the review by
// qualified personnel always, the radiation-safety caution for a nuclear
// gauge.
func cautionsFor(m client.Method) []string {
	out := []string{qc.Caution}
	if m == client.NuclearDirect || m == client.NuclearBackscatter {
		out = append(out, qc.NuclearCaution)
	}
	return out
}

// printResult writes a test's result as an inspector sees it the moment
// it is recorded: the method, the steps of the arithmetic, the densities,
// relative compaction and moisture with the limits beside them, the
// verdict and its reasons, the flags for review and the cautions. who
// names the test (its short id, with a retest's original).
func printResult(w io.Writer, u units, who string, r client.TestResult) error {
	p := &printer{w: w}
	res := r.Result
	p.f("Test %s: %s, %s units\n", who, words.Method(res.Method), u.name())
	if len(r.Steps) > 0 {
		t := newTable(w, "  step", "value", "unit")
		for _, s := range r.Steps {
			q := quantityOf[s.Quantity]
			t.row("  "+s.Name, u.num(q, s.Value).String(), u.unit(q))
		}
		if p.err == nil {
			p.err = t.flush()
		}
	}
	p.f("Result\n")
	printGrade(p, u, res)
	printFindings(p, "For review (flags do not change the verdict):", append(append([]client.Finding(nil), res.Flags...), r.Flags...))
	if len(r.Missing) > 0 {
		p.f("Not yet on this device (the test is graded when they arrive): %s\n", escape(strings.Join(r.Missing, ", ")))
	}
	p.f("\n%s\n", qc.RoundingNote)
	for _, c := range cautionsFor(res.Method) {
		p.f("%s\n", c)
	}
	return p.err
}

// printGrade writes a result's values, each limit beside the value it
// judged, and the verdict with its reasons.
func printGrade(p *printer, u units, res client.Result) {
	p.f("  %-28s %s\n", "wet density", u.show(soil.Density, res.WetDensity))
	p.f("  %-28s %s\n", "dry density", u.show(soil.Density, res.DryDensity))
	p.f("  %-28s %s\n", "moisture", u.show(soil.Percent, res.Moisture))
	if graded(res) {
		p.f("  %-28s %s at %s optimum moisture\n", "maximum dry density", u.show(soil.Density, res.MaxDryDensity),
			u.show(soil.Percent, res.OptimumMoisture))
		rc := u.show(soil.Percent, res.RelativeCompaction)
		if l := words.CompactionLimit(res.Limits); l != "" {
			rc += "   (" + l + ")"
		}
		p.f("  %-28s %s\n", "relative compaction", rc)
		mv := moistureValue(res)
		if l := words.MoistureLimit(res.Limits); l != "" {
			mv += "   (" + l + ")"
		}
		p.f("  %-28s %s\n", "moisture against optimum", mv)
	}
	if res.ZeroAirVoids > 0 {
		p.f("  %-28s %s (saturation %s)\n", "zero-air-voids density", u.show(soil.Density, res.ZeroAirVoids), u.show(soil.Percent, res.Saturation))
	}
	switch {
	case graded(res) && res.Limits.SpecName != "":
		p.f("Verdict: %s against spec %s\n", verdictWord(res.Verdict), quoted(res.Limits.SpecName))
	case graded(res):
		p.f("Verdict: %s\n", verdictWord(res.Verdict))
	default:
		p.f("Verdict: not graded (the test names no reference or spec this device holds)\n")
	}
	for _, r := range res.Reasons {
		p.f("  - %s\n", escape(r.Message))
	}
}

// printFindings writes findings under a heading, or nothing when there are
// none.
func printFindings(p *printer, heading string, fs []client.Finding) {
	if len(fs) == 0 {
		return
	}
	p.f("%s\n", heading)
	for _, f := range fs {
		p.f("  - [%s] %s\n", escape(f.Code), escape(f.Message))
	}
}

// quoted is a name a user chose, escaped and in quotes.
func quoted(s string) string { return `"` + escape(s) + `"` }

// localTime shows t in loc to the minute.
func localTime(t time.Time, loc *time.Location) string {
	if t.IsZero() {
		return "-"
	}
	return t.In(loc).Format("2006-01-02 15:04")
}

// resultJSON is a result in a unit system, rounded at each quantity's
// resolution, for --json.
type resultJSON struct {
	Units              string           `json:"units"`
	Method             client.Method    `json:"method"`
	WetDensity         num              `json:"wet_density"`
	DryDensity         num              `json:"dry_density"`
	Moisture           num              `json:"moisture"`
	MaxDryDensity      num              `json:"max_dry_density"`
	OptimumMoisture    num              `json:"optimum_moisture"`
	RelativeCompaction num              `json:"relative_compaction"`
	MoistureDeviation  num              `json:"moisture_deviation"`
	Verdict            client.Verdict   `json:"verdict"`
	Reasons            []client.Finding `json:"reasons"`
	Flags              []client.Finding `json:"flags"`
	Limits             client.Limits    `json:"limits"`
}

// resultOut rounds a result for --json.
func resultOut(u units, r client.Result) resultJSON {
	out := resultJSON{Units: u.name(), Method: r.Method, WetDensity: u.num(soil.Density, r.WetDensity),
		DryDensity: u.num(soil.Density, r.DryDensity), Moisture: some(r.Moisture, 1), Verdict: r.Verdict,
		Reasons: nonNil(r.Reasons), Flags: nonNil(r.Flags), Limits: r.Limits}
	if graded(r) {
		out.MaxDryDensity, out.OptimumMoisture = u.num(soil.Density, r.MaxDryDensity), some(r.OptimumMoisture, 1)
		out.RelativeCompaction, out.MoistureDeviation = some(r.RelativeCompaction, 1), some(r.MoistureDeviation, 1)
	} else {
		nan := math.NaN()
		out.MaxDryDensity, out.OptimumMoisture, out.RelativeCompaction, out.MoistureDeviation = some(nan, 0), some(nan, 0), some(nan, 0), some(nan, 0)
	}
	return out
}

// nonNil returns s, or an empty slice for nil, so JSON shows [] not null.
func nonNil[T any](s []T) []T {
	if s == nil {
		return []T{}
	}
	return s
}
