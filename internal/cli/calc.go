package cli

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"

	"github.com/spf13/cobra"

	"tamp/internal/valid"
)

func newCalc() *cobra.Command {
	c := &cobra.Command{
		Use:   "calc",
		Short: "Compute a test, a compaction curve, a volume balance or a lot's percent within limits, with no project or server",
	}
	c.AddCommand(newCalcTest(), newCalcCurve(), newCalcVolume(), newCalcPWL())
	return c
}

// flagNames maps the field names of the arithmetic packages that differ from
// the command line's flags.
var flagNames = map[string]string{
	"max_dry_density":    "mdd",
	"optimum_moisture":   "omc",
	"suspect_compaction": "suspect-rc",
	"values[0]":          "values",
	"diameter":           "cylinder-diameter",
	"length":             "cylinder-length",
	"initial_reading":    "balloon-initial",
	"final_reading":      "balloon-final",
}

// inputError rewrites a *valid.FieldError in the command line's words: the
// flag's name and the value as typed.
func inputError(cmd *cobra.Command, err error) error {
	var fe *valid.FieldError
	if !errors.As(err, &fe) {
		return err
	}
	name, ok := flagNames[fe.Field]
	if !ok {
		name = strings.ReplaceAll(fe.Field, "_", "-")
	}
	f := cmd.Flags().Lookup(name)
	if f == nil {
		return err
	}
	if f.Changed {
		return fmt.Errorf("--%s %s: %s", name, f.Value.String(), fe.Rule)
	}
	return fmt.Errorf("--%s: %s", name, fe.Rule)
}

func required(flag, rule string) error { return valid.Missing(flag, rule) }

// num is a value shown at a resolution: it marshals as a JSON number with
// that many decimals, or null when absent.
type num struct {
	v      float64
	places int
	ok     bool
}

func some(v float64, places int) num { return num{v, places, !math.IsNaN(v)} }

func (n num) MarshalJSON() ([]byte, error) {
	if !n.ok || math.IsInf(n.v, 0) {
		return []byte("null"), nil
	}
	return []byte(strconv.FormatFloat(roundHalfAway(n.v, n.places), 'f', n.places, 64)), nil
}

func (n num) String() string {
	if !n.ok || math.IsInf(n.v, 0) {
		return "-"
	}
	return strconv.FormatFloat(roundHalfAway(n.v, n.places), 'f', n.places, 64)
}

// roundHalfAway rounds for display; conformance is decided in package qc by
// the rounding method of the limit, not here.
func roundHalfAway(v float64, places int) float64 {
	s := math.Pow(10, float64(places))
	return math.Round(v*s) / s
}

func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}
