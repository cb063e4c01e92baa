package cli

import (
	"context"
	"fmt"
	"math"
	"strings"
	"time"

	"tamp/client"
	"tamp/internal/qc"
	"tamp/internal/soil"
	"tamp/internal/words"
)

// The demo prints through the shared helpers of format.go (tables that
// escape every cell, units, stations, offsets, verdict words and limits);
// these add what only the story needs.

// demoU shows the project's values in its units.
var demoU = units{demoUnits}

// demoTable is a table of the narrative, indented two spaces (an empty
// first column) and written through the day's printer.
type demoTable struct {
	p *printer
	t *table
}

func newDemoTable(p *printer, header ...string) *demoTable {
	return &demoTable{p: p, t: newTable(demoWriter{p}, append([]string{""}, header...)...)}
}

// row adds a row; the table escapes every cell.
func (t *demoTable) row(cells ...string) { t.t.row(append([]string{""}, cells...)...) }

func (t *demoTable) flush() {
	if err := t.t.flush(); err != nil && t.p.err == nil {
		t.p.err = err
	}
}

// demoWriter writes through a printer, which keeps the first error.
type demoWriter struct{ p *printer }

func (w demoWriter) Write(b []byte) (int, error) {
	if w.p.err != nil {
		return 0, w.p.err
	}
	n, err := w.p.w.Write(b)
	w.p.err = err
	return n, err
}

var demoTestHeader = []string{"TIME", "TEST", "BY", "METHOD", "STATION", "OFFSET", "DRY DENSITY", "MOISTURE (POINTS FROM OPTIMUM; WINDOW)", "RC (LIMIT)", "VERDICT", "NOTE"}

// testRow prints a test as the device that recorded it holds it.
func (d *demoDay) testRow(t *demoTable, dev *demoDevice, id, note string) error {
	tt, err := dev.store.Test(d.project, id)
	if err != nil {
		return err
	}
	r := tt.Result
	t.row(tt.Taken.In(d.cfg.loc).Format("15:04"), d.labels[id], demoFirst(d.who(tt.Author)), methodShort[r.Method],
		demoU.station(tt.Content.Location.Station), demoU.offset(tt.Content.Location.Offset), demoU.show(soil.Density, r.DryDensity),
		demoMoistureText(r), demoRCText(r), verdictWhy(r), note)
	return nil
}

func demoFirst(name string) string {
	if f := strings.Fields(name); len(f) > 0 {
		return f[0]
	}
	return name
}

func demoOr(s, alt string) string {
	if s == "" {
		return alt
	}
	return s
}

func demoWhere(c client.TestInput) string {
	return fmt.Sprintf("sta %s, %s", demoU.station(c.Location.Station), demoU.offset(c.Location.Offset))
}

// demoValue writes a plain value at places decimals with its unit.
func demoValue(v float64, places int, unit string) string {
	if math.IsNaN(v) {
		return "-"
	}
	return some(v, places).String() + " " + unit
}

func demoMoistureText(r client.Result) string {
	w := demoU.show(soil.Percent, r.Moisture)
	if !graded(r) {
		return w
	}
	if r.Limits.MoistureBasis == client.PercentOfOptimum {
		return fmt.Sprintf("%s (%s; %s)", w, moistureValue(r), words.MoistureLimit(r.Limits))
	}
	return fmt.Sprintf("%s (%s; %s)", w, strings.TrimSuffix(moistureValue(r), " points"),
		demoOr(strings.TrimSuffix(words.MoistureLimit(r.Limits), " points of optimum"), "no window"))
}

func demoRCText(r client.Result) string {
	if !graded(r) {
		return "-"
	}
	return fmt.Sprintf("%s (%s)", demoU.show(soil.Percent, r.RelativeCompaction), demoOr(words.CompactionLimit(r.Limits), "no limit"))
}

func demoVerdictText(r client.Result) string {
	return fmt.Sprintf("RC %s, %s", demoU.show(soil.Percent, r.RelativeCompaction), verdictWhy(r))
}

// demoMoisture is the moisture a revision's readings give, percent, or NaN
// for a gauge's (computed from its readings).
func demoMoisture(c client.TestInput) float64 {
	switch r := c.Readings; {
	case r.SandCone != nil:
		return r.SandCone.Moisture
	case r.DriveCylinder != nil:
		return r.DriveCylinder.Moisture
	case r.RubberBalloon != nil:
		return r.RubberBalloon.Moisture
	case r.WetDensity != nil:
		return r.WetDensity.Moisture
	}
	return math.NaN()
}

// demoDuration writes a clock difference as hours and minutes.
func demoDuration(d time.Duration) string {
	d = d.Round(time.Minute).Abs()
	return fmt.Sprintf("%d h %02d min", int(d.Hours()), int(d.Minutes())%60)
}

// demoLift names a placement by its feature and lift.
func demoLift(p client.Placement) string {
	return fmt.Sprintf("%s, lift %d", p.Feature, p.LiftNumber)
}

func (d *demoDay) intro() {
	p := d.p
	p.f("tamp demo: one working day on an invented project\n\n")
	p.f("%s, in the upper Quarrow Valley (invented, as is the crew).\n", demoProjectName)
	p.f("Day %s, time zone %s, US customary units. A tamp server runs in this process on 127.0.0.1\n", d.cfg.day, demoZone)
	p.f("over a SQLite ledger in a temporary directory; each member's device keeps its own store, records with\n")
	p.f("no signal, and syncs when it can.\n\n")
	p.f("Cautions\n")
	for _, c := range []string{qc.NuclearCaution, qc.Caution} {
		p.f("  %s\n", c)
	}
	p.f("\n")
}

func (d *demoDay) printSetUp() {
	su, _ := d.admin.store.SetUp(d.project)
	d.p.f("06:15  Della Ferrow, the administrator, creates the project, adds the crew and enrols each device with a\n")
	system := "SI"
	if su.Units == client.USCustomary {
		system = "US customary"
	}
	d.p.f("       one-time code; at 06:25 she sets the project up: %s, %s units, time zone %s.\n",
		escape(su.Name), system, escape(su.TimeZone))
	t := newDemoTable(d.p, "MEMBER", "ROLE", "DEVICE", "CLOCK")
	for _, dev := range d.devices {
		clock := "right"
		if dev.skew != 0 {
			clock = demoDuration(dev.skew) + " fast"
		}
		t.row(dev.person, string(dev.role), dev.name(), clock)
	}
	t.flush()
	d.p.f("\n")
}

// printQASetUp prints QA's records as QA's laptop holds them.
func (d *demoDay) printQASetUp() {
	qa := d.qa.store
	d.p.f("06:30  Quentin Arlo, the QA manager, defines the specifications, the laboratory references and the borrow\n")
	d.p.f("       sources with their bank tests:\n")
	t := newDemoTable(d.p, "SPECIFICATION", "RELATIVE COMPACTION", "MOISTURE", "TEST FREQUENCY")
	for _, sp := range qa.Specs(d.project) {
		l := client.Limits{MinCompaction: sp.MinCompaction, MoistureBasis: sp.MoistureBasis, MoistureLow: sp.MoistureLow, MoistureHigh: sp.MoistureHigh}
		t.row(sp.Name, words.CompactionLimit(l), words.MoistureLimit(l), "one per "+demoU.show(soil.Volume, sp.VolumePerTest))
	}
	t.flush()
	d.p.f("\n")
	t = newDemoTable(d.p, "REFERENCE", "SAMPLE", "PROCEDURE", "MAX DRY DENSITY", "OPTIMUM", "FROM")
	for _, r := range qa.References(d.project) {
		from := "the laboratory's report"
		if r.Fitted {
			from = fmt.Sprintf("fitted to %d curve points", len(r.Points))
			if !r.Bracketed {
				from += " (not bracketed)"
			}
		}
		t.row(r.Material, r.LabSampleID, fmt.Sprintf("%s (%d), method %s", r.Standard, r.Edition, r.Method),
			demoU.show(soil.Density, r.GradingMaxDryDensity), demoU.show(soil.Percent, r.GradingOptimumMoisture), from)
	}
	t.flush()
	d.p.f("\n")
	t = newDemoTable(d.p, "BORROW SOURCE", "BANK TESTS", "BANK DRY DENSITY", "LOOSE DRY DENSITY")
	for _, b := range qa.BorrowSources(d.project) {
		method := ""
		if len(b.BankTests) > 0 {
			method = " by " + methodShort[b.BankTests[0].Method()]
		}
		t.row(b.Name, fmt.Sprintf("%d%s", len(b.BankTests), method), demoU.show(soil.Density, b.BankDryDensity),
			demoU.show(soil.Density, b.LooseDryDensity))
	}
	t.flush()
	d.p.f("\n")
}

// printOfficeMorning prints the office's records as its desktop holds them.
func (d *demoDay) printOfficeMorning() {
	of := d.office.store
	d.p.f("06:40  Odile Brandt, in the office, registers the equipment and lays out the day's lifts:\n")
	t := newDemoTable(d.p, "EQUIPMENT", "SERIAL", "MODEL", "CALIBRATION DUE")
	for _, e := range of.Equipment(d.project) {
		t.row(strings.ReplaceAll(string(e.Kind), "_", " "), e.SerialNumber, e.Model, e.CalibrationDue)
	}
	t.flush()
	d.p.f("\n")
	sources := map[string]string{}
	for _, b := range of.BorrowSources(d.project) {
		sources[b.ID] = b.Name
	}
	t = newDemoTable(d.p, "LIFT", "STATIONS", "AREA", "THICKNESS", "COMPACTED VOLUME", "FROM")
	for _, p := range of.Placements(d.project) {
		stations := ""
		if p.Stations != nil {
			stations = demoU.station(p.Stations.From) + " to " + demoU.station(p.Stations.To)
		}
		t.row(demoLift(p), stations, demoU.area(p.Area), demoU.show(soil.Depth, p.Thickness), demoU.show(soil.Volume, p.CompactedVolume),
			sources[p.BorrowSourceID])
	}
	t.flush()
	d.p.f("\n")
}

// qaReports prints the QA manager's reports, computed on QA's laptop from
// its own copy of the ledger.
func (d *demoDay) qaReports(context.Context) error {
	d.clock.at(17, 45)
	qa, project := d.qa.store, d.project
	p := d.p
	p.f("17:45  Quentin Arlo's reports, computed on his laptop from its own copy of the ledger\n\n")

	p.f("Retest audit: every failing original test, its retests and how it was closed\n")
	t := newDemoTable(p, "FAILED", "BY", "WHERE", "RESULT", "RETESTS", "CLOSED BY", "STATION SHIFT")
	for _, c := range qa.RetestAudit(project) {
		var re []string
		shift := "-"
		if len(c.Retests) > 0 {
			shift = demoU.show(soil.Length, c.StationShift)
		}
		for _, r := range c.Retests {
			re = append(re, fmt.Sprintf("%s %s", d.labels[r.ID], verdictWhy(r.Result)))
		}
		t.row(d.labels[c.Failed.ID], demoFirst(d.who(c.Failed.Author)), demoWhere(c.Failed.Content),
			demoVerdictText(c.Failed.Result), demoOr(strings.Join(re, "; "), "none"), string(c.Closure), shift)
	}
	t.flush()
	p.f("\n")

	p.f("Open failures and conflicts to settle\n")
	t = newDemoTable(p, "TEST", "BY", "WHERE", "STATE")
	for _, f := range qa.OpenFailures(project) {
		t.row(d.labels[f.ID], demoFirst(d.who(f.Author)), demoWhere(f.Content), "open failure: "+demoVerdictText(f.Result))
	}
	for _, c := range qa.Conflicts(project) {
		t.row(d.labels[c.ID], demoFirst(d.who(c.Author)), demoWhere(c.Content),
			fmt.Sprintf("concurrent corrections; %d revisions, review %s", len(c.Revisions), c.ReviewStatus))
	}
	t.flush()
	p.f("\n")

	p.f("Test frequency: final tests against each lift's specification (a reworked failure counts once, through its retest; voided and returned tests do not count)\n")
	t = newDemoTable(p, "LIFT", "SPECIFICATION", "COMPACTED VOLUME", "TESTS", "REQUIRED", "FREQUENCY")
	for _, f := range qa.Frequency(project) {
		state := "met"
		if f.Shortfall > 0 {
			state = fmt.Sprintf("short by %d", f.Shortfall)
		}
		t.row(demoLift(f.Placement), d.specs[f.SpecID], demoU.show(soil.Volume, f.Placement.CompactedVolume),
			fmt.Sprint(f.Taken), fmt.Sprint(f.Required), state)
	}
	t.flush()
	p.f("\n")

	lots, err := qa.Lots(project, client.LotScope{})
	if err != nil {
		return err
	}
	p.f("Lots: percent within limits of relative compaction (final graded tests; Q = (mean - limit) / s)\n")
	t = newDemoTable(p, "LIFT", "SPECIFICATION", "N", "MEAN RC", "STD DEV", "RC LIMIT", "Q", "PWL")
	for _, l := range lots {
		if l.N == 0 {
			continue // no estimate of relative compaction
		}
		t.row(demoLift(l.Placement), d.specs[l.SpecID], fmt.Sprint(l.N), demoValue(l.Mean, 1, "%"),
			demoValue(l.StdDev, 2, "%"), demoValue(l.LowerLimit, 0, "%"), some(l.QualityIndex, 2).String(), demoValue(l.PWL, 1, "%"))
	}
	t.flush()
	p.f("\n")

	bal, err := qa.Reconcile(project)
	if err != nil {
		return err
	}
	p.f("Volume reconciliation by dry mass, per borrow source\n")
	t = newDemoTable(p, "BORROW SOURCE", "COMPACTED", "FILL DRY DENSITY (TESTS)", "BANK DRY DENSITY", "BANK VOLUME", "SHRINKAGE",
		"LOOSE HAULED", "LOOSE EXPECTED")
	var def string
	for _, b := range bal {
		if b.Scope != client.BorrowSourceScope {
			continue
		}
		t.row(b.BorrowSource, demoU.show(soil.Volume, b.CompactedVolume), fmt.Sprintf("%s (%d)", demoU.show(soil.Density, b.FillDryDensity), b.Tests),
			demoU.show(soil.Density, b.BankDryDensity), demoU.show(soil.Volume, b.BankVolume), demoValue(b.ShrinkagePercent, 1, "%"),
			demoU.show(soil.Volume, b.LooseHauled), demoU.show(soil.Volume, b.LooseExpected))
		def = b.ShrinkDefinition
	}
	t.flush()
	if def != "" {
		p.f("  Shrinkage: %s\n", escape(def))
	}
	p.f("\nPer feature, with the bank volume still needed for the rest of its design (range: 95 %% t-intervals on both densities)\n")
	t = newDemoTable(p, "FEATURE", "DESIGN", "PLACED", "REMAINING", "BANK STILL NEEDED", "RANGE")
	for _, b := range bal {
		if b.Scope != client.FeatureScope {
			continue
		}
		need, rng := "-", "-"
		if b.StillNeeded > 0 {
			need = demoU.show(soil.Volume, b.StillNeeded)
			rng = demoU.num(soil.Volume, b.StillNeededLow).String() + " to " + demoU.num(soil.Volume, b.StillNeededHigh).String()
		}
		t.row(b.Name, demoU.show(soil.Volume, b.DesignVolume), demoU.show(soil.Volume, b.CompactedVolume), demoU.show(soil.Volume, b.RemainingVolume), need, rng)
	}
	t.flush()
	p.f("\n  %s\n\n", qc.Caution)
	return nil
}

func (d *demoDay) printLedger(sum *demoSummary) {
	p := d.p
	p.f("The ledger\n")
	p.f("  %d tests recorded on the devices, %d in the ledger (%d retests); %d open failure(s), %d conflict(s).\n",
		sum.TestsRecorded, sum.TestsInLedger, sum.Retests, sum.OpenFailures, sum.Conflicts)
	p.f("  %d entries; head %s\n", sum.LedgerEntries, sum.LedgerHead)
	t := newDemoTable(p, "DEVICE", "VERIFIED TO ENTRY", "HEAD", "PENDING", "AGREES")
	for _, dev := range sum.Devices {
		agree := "yes"
		if !dev.InAgreement {
			agree = "NO"
		}
		t.row(dev.Name, fmt.Sprint(dev.VerifiedSeq), demoShortHash(dev.VerifiedHead), fmt.Sprint(dev.Pending), agree)
	}
	t.flush()
	if sum.DevicesInAgreement {
		p.f("  Every device verified the server's hash chain to the same head.\n")
	} else {
		p.f("  Not every device verified the server's chain to its head.\n")
	}
	if k := sum.Kept; k != nil {
		p.f("\nKept\n")
		p.f("  %s   the office's store (closed, then copied; the copy was opened and checked)\n", escape(k.OfficeStore))
		p.f("  %s   the project's signed ledger (verified offline)\n", escape(k.Ledger))
		p.f("  Try: tamp status --store %s\n", escape(k.OfficeStore))
		p.f("       tamp verify %s\n", escape(k.Ledger))
	}
}

func demoShortHash(h string) string {
	if len(h) > 16 {
		return h[:16] + "..."
	}
	return h
}
