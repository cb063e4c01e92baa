package exports

import (
	"math"
	"strconv"
	"strings"

	"tamp/internal/soil"
)

// units writes SI values in a unit system at the resolution tamp reports.
type units struct{ sys soil.System }

// num is v (SI) in q's unit at q's resolution, as a CSV cell.
func (u units) num(q soil.Quantity, v float64) string {
	return fixed(u.sys.FromSI(q, v), u.sys.Places(q))
}

// opt is num when ok, else the empty cell of a value that does not apply.
func (u units) opt(q soil.Quantity, v float64, ok bool) string {
	if !ok {
		return ""
	}
	return u.num(q, v)
}

// col is a column name with q's unit: dry_density_pcf, moisture_pct.
func (u units) col(name string, q soil.Quantity) string {
	unit := u.sys.Unit(q)
	switch unit {
	case "":
		return name
	case "%":
		unit = "pct"
	}
	return name + "_" + strings.ReplaceAll(unit, "/", "_")
}

// fixed formats v with places decimals, rounded half away from zero; NaN
// and infinities, which no reading holds, are empty.
func fixed(v float64, places int) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return ""
	}
	s := math.Pow(10, float64(places))
	r := math.Round(v*s) / s
	if r == 0 {
		r = 0 // no "-0.0"
	}
	return strconv.FormatFloat(r, 'f', places, 64)
}

// formulaStart are the first characters that make a spreadsheet read a
// cell as a formula, and the apostrophe that marks a cell already
// prefixed.
const formulaStart = "=+-@\t\r'"

// text is a text cell: s, with one apostrophe in front when it starts
// with a character a spreadsheet would read as a formula (see the package
// documentation).
func text(s string) string {
	if s != "" && strings.IndexByte(formulaStart, s[0]) >= 0 {
		return "'" + s
	}
	return s
}

// CellText returns the text a text cell of this package's CSV holds: the
// cell with the one apostrophe it was written with removed, when it starts
// with an apostrophe followed by =, +, -, @, a tab, a carriage return or an
// apostrophe. Number cells need no such step.
func CellText(cell string) string {
	if len(cell) >= 2 && cell[0] == '\'' && strings.IndexByte(formulaStart, cell[1]) >= 0 {
		return cell[1:]
	}
	return cell
}

// join is codes joined by ';', each a text cell's worth of text.
func join(codes []string) string { return text(strings.Join(codes, ";")) }

func boolCell(b bool) string { return strconv.FormatBool(b) }
