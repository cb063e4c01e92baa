// Package words writes what tamp shows people in the same words wherever
// it shows them: on the command line and on the review page. It holds the
// writing of limits as a spec writes them and of a record's short id;
// numbers in a unit system are soil.System's (Show, Station).
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
