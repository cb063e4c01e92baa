// Package words writes what tamp shows people in the same words wherever
// it shows them: on the command line and on the review page. It holds the
// writing of limits as a spec writes them, of a record's short id and of
// the test methods; numbers in a unit system are soil.System's (Show,
// Station).
package words

import (
	"strings"

	"tamp/client"
)

// ShortID is the part of an id tamp shows and accepts: its last eight
// characters, from the random part of the UUIDv7.
func ShortID(id string) string {
	if len(id) <= 8 {
		return id
	}
	return id[len(id)-8:]
}

// CompactionLimit is the limit a test's relative compaction was judged
// against, as its spec writes it: "min 95 %", or "" for none.
func CompactionLimit(l client.Limits) string {
	if l.MinCompaction == "" {
		return ""
	}
	return "min " + l.MinCompaction + " %"
}

// MoistureLimit is the moisture window a test was judged against, as its
// spec writes it: "-2 to +2 points of optimum", "at most +3 points of
// optimum", or "" for none.
func MoistureLimit(l client.Limits) string {
	unit := "points of optimum"
	if l.MoistureBasis == client.PercentOfOptimum {
		unit = "% of optimum"
	}
	signed := func(s string) string {
		if l.MoistureBasis != client.PercentOfOptimum && !strings.HasPrefix(s, "-") && !strings.HasPrefix(s, "+") {
			return "+" + s
		}
		return s
	}
	switch {
	case l.MoistureLow != "" && l.MoistureHigh != "":
		return signed(l.MoistureLow) + " to " + signed(l.MoistureHigh) + " " + unit
	case l.MoistureLow != "":
		return "at least " + signed(l.MoistureLow) + " " + unit
	case l.MoistureHigh != "":
		return "at most " + signed(l.MoistureHigh) + " " + unit
	}
	return ""
}

// methodNames are the methods in words, with their standards.
var methodNames = map[client.Method]string{
	client.NuclearDirect:       "nuclear gauge, direct transmission (ASTM D6938)",
	client.NuclearBackscatter:  "nuclear gauge, backscatter (ASTM D6938)",
	client.SandConeMethod:      "sand cone (ASTM D1556 / AASHTO T 191)",
	client.DriveCylinderMethod: "drive cylinder (ASTM D2937)",
	client.RubberBalloonMethod: "rubber balloon (ASTM D2167)",
	client.MeasuredWetDensity:  "wet density as measured",
}

// Method is a test method in words, with its standard ("" for none).
func Method(m client.Method) string { return methodNames[m] }
