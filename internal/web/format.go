package web

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"

	"tamp/client"
	"tamp/internal/soil"
)

// format.go shows SI values in the project's units: each quantity at the
// resolution tamp reports it at (soil.System.Places), stations in the
// trade's notation, offsets with L or R, verdicts and methods in words.
// Limits and short ids are written as the command line writes them
// (package words).

// units shows SI values in a unit system.
type units struct{ sys soil.System }

// quantityOf maps the client's quantities to the unit table's.
var quantityOf = map[client.Quantity]soil.Quantity{client.DensityQuantity: soil.Density, client.MassQuantity: soil.Mass,
	client.SmallVolumeQuantity: soil.SmallVolume, client.VolumeQuantity: soil.Volume, client.LengthQuantity: soil.Length,
	client.DepthQuantity: soil.Depth, client.PercentQuantity: soil.Percent, client.RatioQuantity: soil.Ratio}

// fixed writes v rounded half away from zero to places decimals, never
// "-0.0".
func fixed(v float64, places int) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "-"
	}
	p := math.Pow(10, float64(places))
	r := math.Round(v*p) / p
	if r == 0 {
		r = 0 // drops the sign of -0
	}
	return strconv.FormatFloat(r, 'f', places, 64)
}

// num returns v (SI) in q's unit at q's resolution, without the unit.
func (u units) num(q soil.Quantity, v float64) string {
	return fixed(u.sys.FromSI(q, v), u.sys.Places(q))
}

// unit names q's unit ("pcf", "%", "" for a ratio).
func (u units) unit(q soil.Quantity) string { return u.sys.Unit(q) }

// show returns v (SI) in q's unit at q's resolution, with the unit.
func (u units) show(q soil.Quantity, v float64) string {
	if unit := u.unit(q); unit != "" {
		return u.num(q, v) + " " + unit
	}
	return u.num(q, v)
}

// name is "US customary" or "SI".
func (u units) name() string {
	if u.sys == soil.US {
		return "US customary"
	}
	return "SI"
}

// station writes a station (m along the alignment) in the trade's
// notation (soil.System.Station).
func (u units) station(m float64) string { return u.sys.Station(m) }

// offset writes an offset from the alignment (m, negative to the left)
// as a distance with L or R.
func (u units) offset(m float64) string {
	switch {
	case m < 0:
		return u.show(soil.Length, -m) + " L"
	case m > 0:
		return u.show(soil.Length, m) + " R"
	}
	return u.show(soil.Length, 0)
}

// verdict is a verdict as the page shows it: a class for the glyph and the
// colour, and words.
type verdict struct {
	Class string // pass, fail, pending or void: the glyph drawn
	Word  string // PASS, FAIL, NOT GRADED, VOIDED
	Why   string // a failure's reasons in the trade's words: under-compacted, too dry, too wet
}

// verdictOf shows a test's verdict; a voided test shows VOIDED whatever
// its grade.
func verdictOf(t client.Test) verdict {
	if t.Voided {
		return verdict{Class: "void", Word: "VOIDED"}
	}
	return gradeOf(t.Result)
}

// gradeOf shows a result's verdict.
func gradeOf(r client.Result) verdict {
	switch r.Verdict {
	case client.Pass:
		return verdict{Class: "pass", Word: "PASS"}
	case client.Fail:
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
				why = append(why, visible(f.Code))
			}
		}
		return verdict{Class: "fail", Word: "FAIL", Why: strings.Join(why, ", ")}
	}
	return verdict{Class: "pending", Word: "NOT GRADED"}
}

// graded reports whether r carries a grade against a reference and spec.
func graded(r client.Result) bool { return r.Verdict == client.Pass || r.Verdict == client.Fail }

// reviewWord is where a test stands with the office, in words.
func reviewWord(s client.ReviewStatus) string {
	switch s {
	case client.Approved:
		return "approved"
	case client.Returned:
		return "returned"
	}
	return "awaiting review"
}

// methodShort are the methods in a word or two, for tables.
var methodShort = map[client.Method]string{
	client.NuclearDirect: "nuclear DT", client.NuclearBackscatter: "nuclear BS", client.SandConeMethod: "sand cone",
	client.DriveCylinderMethod: "drive cylinder", client.RubberBalloonMethod: "rubber balloon", client.MeasuredWetDensity: "wet density",
}

// nuclear reports whether m is a nuclear gauge method.
func nuclear(m client.Method) bool {
	return m == client.NuclearDirect || m == client.NuclearBackscatter
}

// moistureAgainstOptimum is a result's moisture against optimum on its
// spec's basis: "+0.5 points" or "104.2 % of optimum".
func moistureAgainstOptimum(r client.Result) string {
	if r.Limits.MoistureBasis == client.PercentOfOptimum {
		return fixed(r.MoisturePercentOfOptimum, 1) + " % of optimum"
	}
	s := fixed(r.MoistureDeviation, 1)
	if !strings.HasPrefix(s, "-") {
		s = "+" + s
	}
	return s + " points"
}

// localTime shows t in loc to the minute, or "-" for no time.
func localTime(t time.Time, loc *time.Location) string {
	if t.IsZero() {
		return "-"
	}
	return t.In(loc).Format("2006-01-02 15:04")
}

// visible returns text someone typed (a name, remarks, a comment, a
// reason) with what would not show, or would show misleadingly, written
// out: C0 controls but newline and tab, and DEL, as \xHH; C1 controls, the
// bidirectional controls (U+061C, U+200E, U+200F, U+202A-U+202E,
// U+2066-U+2069) and the line and paragraph separators as \uHHHH; each
// byte of invalid UTF-8 as \xHH. html/template then escapes the markup; this
// keeps a reviewer from reading text reordered or hidden by characters
// they cannot see.
func visible(s string) string {
	clean := true
	for _, r := range s {
		if hidden(r) {
			clean = false
			break
		}
	}
	if clean {
		return s
	}
	var b strings.Builder
	for i := 0; i < len(s); {
		r, n := utf8.DecodeRuneInString(s[i:])
		switch {
		case r == utf8.RuneError && n == 1:
			fmt.Fprintf(&b, `\x%02x`, s[i])
		case r < 0x20 && r != '\n' && r != '\t' || r == 0x7f:
			fmt.Fprintf(&b, `\x%02x`, r)
		case hidden(r):
			fmt.Fprintf(&b, `\u%04x`, r)
		default:
			b.WriteString(s[i : i+n])
		}
		i += n
	}
	return b.String()
}

// hidden reports whether visible writes r out.
func hidden(r rune) bool {
	switch {
	case r == utf8.RuneError:
		return true // maybe invalid UTF-8: visible looks closer
	case r < 0x20 && r != '\n' && r != '\t', r >= 0x7f && r <= 0x9f:
		return true
	case r == 0x061c, r == 0x200e, r == 0x200f, r >= 0x202a && r <= 0x202e, r >= 0x2066 && r <= 0x2069:
		return true
	case r == 0x2028, r == 0x2029:
		return true
	}
	return false
}
