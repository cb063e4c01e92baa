package exports

import (
	"encoding/csv"
	"fmt"
	"io"
	"strconv"
	"time"

	"tamp/client"
	"tamp/internal/soil"
)

// newCSV returns an RFC 4180 writer: comma-separated, CRLF line ends.
func newCSV(w io.Writer) *csv.Writer {
	cw := csv.NewWriter(w)
	cw.UseCRLF = true
	return cw
}

// timeCell is an instant in RFC 3339, UTC, to the second's fraction kept.
func timeCell(t time.Time) string {
	if t.IsZero() {
		return ""
	}
	return t.UTC().Format(time.RFC3339Nano)
}

// locationColumns and locationCells: where a test was taken.
func locationColumns(u units) []string {
	return []string{u.col("station", soil.Length), u.col("offset", soil.Length), u.col("elevation", soil.Length),
		"latitude_deg", "longitude_deg", u.col("gps_accuracy", soil.Length), "location_description"}
}

func locationCells(u units, l client.Location) []string {
	lat, lon, acc := "", "", ""
	if p := l.Position; p != nil {
		lat, lon, acc = fixed(p.Latitude, 7), fixed(p.Longitude, 7), u.num(soil.Length, p.Accuracy)
	}
	return []string{u.num(soil.Length, l.Station), u.num(soil.Length, l.Offset), u.num(soil.Length, l.Elevation),
		lat, lon, acc, text(l.Description)}
}

// inputColumns and inputCells: what the inspector entered for a revision,
// every raw reading of every method in its own columns (empty for the
// methods the revision is not of).
func inputColumns(u units) []string {
	c := []string{"feature", "lift", u.col("lift_thickness", soil.Depth), "placement_id"}
	c = append(c, locationColumns(u)...)
	c = append(c, "method", "reference_id", "spec_id", "equipment_id",
		// nuclear gauge (ASTM D6938): up to two readings
		u.col("nuclear_probe_depth", soil.Depth),
		u.col("nuclear_wet_density_1", soil.Density), u.col("nuclear_water_per_volume_1", soil.Density),
		u.col("nuclear_wet_density_2", soil.Density), u.col("nuclear_water_per_volume_2", soil.Density),
		u.col("nuclear_agreement", soil.Density), "nuclear_correction_id", u.col("nuclear_oven_moisture", soil.Percent),
		// sand cone (ASTM D1556)
		u.col("sand_cone_sand_density", soil.Density), u.col("sand_cone_initial_mass", soil.Mass),
		u.col("sand_cone_final_mass", soil.Mass), u.col("sand_cone_sand_used", soil.Mass),
		u.col("sand_cone_cone_correction", soil.Mass), u.col("sand_cone_soil_mass", soil.Mass),
		u.col("sand_cone_moisture", soil.Percent),
		// drive cylinder (ASTM D2937)
		u.col("drive_cylinder_diameter", soil.Depth), u.col("drive_cylinder_length", soil.Depth),
		u.col("drive_cylinder_soil_mass", soil.Mass), u.col("drive_cylinder_moisture", soil.Percent),
		// rubber balloon (ASTM D2167)
		u.col("rubber_balloon_initial_reading", soil.SmallVolume), u.col("rubber_balloon_final_reading", soil.SmallVolume),
		u.col("rubber_balloon_soil_mass", soil.Mass), u.col("rubber_balloon_moisture", soil.Percent),
		// a wet density measured by other means
		u.col("measured_wet_density", soil.Density), u.col("measured_moisture", soil.Percent),
		// oversize (ASTM D4718)
		u.col("oversize", soil.Percent), "oversize_bulk_specific_gravity", u.col("oversize_moisture", soil.Percent),
		"remarks")
	return c
}

func inputCells(u units, in client.TestInput) []string {
	c := []string{text(in.Feature), strconv.FormatUint(uint64(in.LiftNumber), 10),
		u.opt(soil.Depth, in.LiftThickness, in.LiftThickness != 0), text(in.PlacementID)}
	c = append(c, locationCells(u, in.Location)...)
	r := in.Readings
	c = append(c, string(r.Method()), text(in.ReferenceID), text(in.SpecID), text(in.EquipmentID))

	nuc := make([]string, 8)
	if g := r.Nuclear; g != nil {
		nuc[0] = u.opt(soil.Depth, g.ProbeDepth, !g.Backscatter && g.ProbeDepth != 0)
		for i, rd := range g.Readings {
			if i < 2 {
				nuc[1+2*i] = u.num(soil.Density, rd.WetDensity)
				nuc[2+2*i] = u.num(soil.Density, rd.WaterPerVolume)
			}
		}
		agreement := g.Agreement
		if agreement == 0 {
			agreement = soil.DefaultReadingAgreement
		}
		nuc[5] = u.num(soil.Density, agreement)
		nuc[6] = text(g.CorrectionID)
		if g.OvenMoisture != nil {
			nuc[7] = u.num(soil.Percent, *g.OvenMoisture)
		}
	}
	c = append(c, nuc...)

	sc := make([]string, 7)
	if s := r.SandCone; s != nil {
		masses := s.SandUsed == 0 // the apparatus's masses were given instead of the sand used
		sc = []string{u.num(soil.Density, s.SandDensity), u.opt(soil.Mass, s.InitialMass, masses), u.opt(soil.Mass, s.FinalMass, masses),
			u.opt(soil.Mass, s.SandUsed, !masses), u.num(soil.Mass, s.ConeCorrection), u.num(soil.Mass, s.SoilMass), u.num(soil.Percent, s.Moisture)}
	}
	c = append(c, sc...)

	dc := make([]string, 4)
	if d := r.DriveCylinder; d != nil {
		dc = []string{u.num(soil.Depth, d.Diameter), u.num(soil.Depth, d.Length), u.num(soil.Mass, d.SoilMass), u.num(soil.Percent, d.Moisture)}
	}
	c = append(c, dc...)

	rb := make([]string, 4)
	if b := r.RubberBalloon; b != nil {
		rb = []string{u.num(soil.SmallVolume, b.InitialReading), u.num(soil.SmallVolume, b.FinalReading),
			u.num(soil.Mass, b.SoilMass), u.num(soil.Percent, b.Moisture)}
	}
	c = append(c, rb...)

	wd := make([]string, 2)
	if m := r.WetDensity; m != nil {
		wd = []string{u.num(soil.Density, m.WetDensity), u.num(soil.Percent, m.Moisture)}
	}
	c = append(c, wd...)

	ov := make([]string, 3)
	if o := in.Oversize; o != nil {
		ov = []string{u.num(soil.Percent, o.Percent), fixed(o.BulkSpecificGravity, 3), u.num(soil.Percent, o.Moisture)}
	}
	c = append(c, ov...)
	return append(c, text(in.Remarks))
}

// testColumns is the header of TestsCSV in u.
func testColumns(u units) []string {
	c := []string{"test_id", "revision_id", "revisions", "day", "device_time_utc", "author", "device"}
	c = append(c, inputColumns(u)...)
	c = append(c,
		u.col("wet_density", soil.Density), u.col("dry_density", soil.Density), u.col("moisture", soil.Percent),
		u.col("max_dry_density", soil.Density), u.col("optimum_moisture", soil.Percent),
		u.col("relative_compaction", soil.Percent), "moisture_deviation_points", u.col("moisture_of_optimum", soil.Percent),
		u.col("zero_air_voids_density", soil.Density), u.col("saturation", soil.Percent),
		"min_compaction_pct", "moisture_basis", "moisture_low", "moisture_high",
		"verdict", "reasons", "flags", "missing",
		"review_status", "voided", "exception_accepted", "retest_of", "retests")
	return c
}

// testCells is one test's row: its current revision and its result.
func testCells(u units, t client.Test) []string {
	c := []string{text(t.ID), text(t.Current), strconv.Itoa(len(t.Revisions)), t.Day, timeCell(t.Taken), text(t.Author), text(t.Device)}
	c = append(c, inputCells(u, t.Content)...)
	r := t.Result
	densities := r.DryDensity != 0 || r.WetDensity != 0 // zero: the readings could not be computed
	graded := densities && r.MaxDryDensity != 0         // zero: the reference has not reached the device
	moistureRef := graded && r.OptimumMoisture != 0
	zav := densities && r.ZeroAirVoids != 0 // zero: the reference gives no specific gravity
	flags := codes(r.Flags)
	flags = append(flags, codes(t.Flags)...)
	c = append(c,
		u.opt(soil.Density, r.WetDensity, densities), u.opt(soil.Density, r.DryDensity, densities), u.opt(soil.Percent, r.Moisture, densities),
		u.opt(soil.Density, r.MaxDryDensity, graded), u.opt(soil.Percent, r.OptimumMoisture, graded),
		u.opt(soil.Percent, r.RelativeCompaction, graded), u.opt(soil.Percent, r.MoistureDeviation, moistureRef),
		u.opt(soil.Percent, r.MoisturePercentOfOptimum, moistureRef),
		u.opt(soil.Density, r.ZeroAirVoids, zav), u.opt(soil.Percent, r.Saturation, zav),
		limit(r.Limits.MinCompaction), string(r.Limits.MoistureBasis), limit(r.Limits.MoistureLow), limit(r.Limits.MoistureHigh),
		string(r.Verdict), join(codes(r.Reasons)), join(flags), join(t.Missing),
		string(t.ReviewStatus), boolCell(t.Voided), boolCell(t.ExceptionAccepted), text(t.RetestOf), join(t.Retests))
	return c
}

// limit is a spec's limit as written ("95", "-2"): a number cell when it
// reads as a number, else a text cell.
func limit(s string) string {
	if _, err := strconv.ParseFloat(s, 64); err == nil {
		return s
	}
	return text(s)
}

func codes(fs []client.Finding) []string {
	out := make([]string, 0, len(fs))
	for _, f := range fs {
		out = append(out, f.Code)
	}
	return out
}

// TestsCSV writes tests as an RFC 4180 CSV (CRLF line ends, a header row):
// one row per test, of its current revision, voided tests included (the
// voided column says so), in the order given. Values are in sys's units
// at the methods' resolution, the unit in the column name; reasons, flags
// and the ids of retests are codes joined by ';'. It returns the first
// write error.
func TestsCSV(w io.Writer, tests []client.Test, sys soil.System) error {
	u := units{sys}
	cw := newCSV(w)
	if err := cw.Write(testColumns(u)); err != nil {
		return fmt.Errorf("exports: tests csv: %w", err)
	}
	for _, t := range tests {
		if err := cw.Write(testCells(u, t)); err != nil {
			return fmt.Errorf("exports: tests csv: test %s: %w", t.ID, err)
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("exports: tests csv: %w", err)
	}
	return nil
}

// The kinds of history rows.
const (
	RevisionRow  = "revision"  // the original or a correction
	VoidRow      = "void"      // the test was withdrawn
	ReviewRow    = "review"    // an office review of a revision
	ExceptionRow = "exception" // QA accepted a failing revision as it stands
)

// historyColumns is the header of HistoryCSV in u.
func historyColumns(u units) []string {
	c := []string{"test_id", "kind", "event_id", "time_utc", "author", "supersedes", "revision", "current",
		"decision", "reason"}
	return append(c, inputColumns(u)...)
}

// HistoryCSV writes every test's history as an RFC 4180 CSV (CRLF line
// ends, a header row), test by test in the order given: one row per
// revision, the original first (with the revision it supersedes, the
// correction's reason, author, hybrid-clock time and the revision's
// readings), then a row per void, review and exception, the kind column
// saying which. A review's comment, a void's and an exception's reason
// are in the reason column; the revision column names the revision a
// review or an exception concerns. Voids and exceptions carry no time of
// their own in the test's history: their time cell is empty. It returns
// the first write error.
func HistoryCSV(w io.Writer, tests []client.Test, sys soil.System) error {
	u := units{sys}
	cols := historyColumns(u)
	blankInput := make([]string, len(inputColumns(u)))
	cw := newCSV(w)
	if err := cw.Write(cols); err != nil {
		return fmt.Errorf("exports: history csv: %w", err)
	}
	write := func(t client.Test, cells []string) error {
		if err := cw.Write(cells); err != nil {
			return fmt.Errorf("exports: history csv: test %s: %w", t.ID, err)
		}
		return nil
	}
	for _, t := range tests {
		for _, r := range t.Revisions {
			row := []string{text(t.ID), RevisionRow, text(r.EventID), timeCell(r.Time), text(r.Author), text(r.Supersedes), text(r.EventID),
				boolCell(r.EventID == t.Current), "", text(r.Reason)}
			if err := write(t, append(row, inputCells(u, r.Content)...)); err != nil {
				return err
			}
		}
		for _, v := range t.Voids {
			row := []string{text(t.ID), VoidRow, text(v.EventID), "", text(v.Author), "", "", "", "", text(v.Reason)}
			if err := write(t, append(row, blankInput...)); err != nil {
				return err
			}
		}
		for _, r := range t.Reviews {
			row := []string{text(t.ID), ReviewRow, text(r.EventID), timeCell(r.Time), text(r.Author), "", text(r.Revision),
				boolCell(r.Revision == t.Current), string(r.Decision), text(r.Comment)}
			if err := write(t, append(row, blankInput...)); err != nil {
				return err
			}
		}
		for _, e := range t.Exceptions {
			row := []string{text(t.ID), ExceptionRow, text(e.EventID), "", text(e.Author), "", text(e.Revision),
				boolCell(e.Revision == t.Current), "", text(e.Reason)}
			if err := write(t, append(row, blankInput...)); err != nil {
				return err
			}
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("exports: history csv: %w", err)
	}
	return nil
}
