package exports

import (
	"encoding/json"
	"fmt"
	"io"
)

// ReportSchema names the layout ReportJSON writes; its version changes
// when a report's layout changes in a way a reader must know of.
const (
	ReportSchema        = "tamp.report"
	ReportSchemaVersion = 2
)

// report is the envelope of a report's JSON.
type report struct {
	Schema  string `json:"schema"`
	Version int    `json:"version"`
	Report  string `json:"report"`
	Data    any    `json:"data"`
}

// ReportJSON writes v, a report's values, as indented JSON in an envelope
// that names the schema and its version and the report: {"schema":
// "tamp.report", "version": 1, "report": name, "data": v}. The name is
// lower-case letters, digits and underscores (retest_audit), so it can
// also name a file. It returns an error naming the rule for another name,
// and the first encoding or write error.
func ReportJSON(w io.Writer, name string, v any) error {
	if !reportName(name) {
		return fmt.Errorf("exports: report name %q: must be 1 to 64 lower-case letters, digits or underscores, starting with a letter", name)
	}
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(report{Schema: ReportSchema, Version: ReportSchemaVersion, Report: name, Data: v}); err != nil {
		return fmt.Errorf("exports: report %s: %w", name, err)
	}
	return nil
}

func reportName(s string) bool {
	if len(s) == 0 || len(s) > 64 || s[0] < 'a' || s[0] > 'z' {
		return false
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		if !(c >= 'a' && c <= 'z' || c >= '0' && c <= '9' || c == '_') {
			return false
		}
	}
	return true
}
