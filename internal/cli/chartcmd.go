package cli

import (
	"errors"
	"fmt"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"

	"tamp/client"
	"tamp/internal/chart"
)

// newQAChart is tamp qa chart: a moisture-density chart of one laboratory
// reference, or a run chart of relative compaction, written to a file.
func newQAChart(f *projectFlags) *cobra.Command {
	var ref, specName, out string
	var run bool
	c := &cobra.Command{
		Use:   "chart (--reference SAMPLE | --run) --out FILE.svg|FILE.png",
		Short: "Draw a moisture-density chart of a laboratory reference, or a run chart of relative compaction",
		Long: `Draw a chart from this device's copy of the project and write it to --out, as
SVG or PNG by the file's extension.

--reference draws the reference's compaction curve and points, the zero-air-
voids line for its specific gravity, the spec's moisture window and minimum
relative compaction, and the field tests graded against both (a filled circle
passes, a cross fails). --run draws each test's relative compaction against
the time it was taken, with the spec's minimum. --spec chooses the spec; by
default the one most of the tests name.`,
		Example: `  tamp qa chart --reference L-12 --out l-12.svg
  tamp qa chart --run --spec embankment --out run.png`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			if (ref == "") == !run {
				return failf("--reference, --run: give one: --reference SAMPLE for a moisture-density chart, or --run for a run chart")
			}
			switch strings.ToLower(filepath.Ext(out)) {
			case ".svg", ".png":
			default:
				return failf("--out %s: the file name must end in .svg or .png", quoted(out))
			}
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			tests := ss.s.Tests(ss.project)
			var lr client.LabReference
			if ref != "" {
				if lr, err = ss.chartReference(ref); err != nil {
					return err
				}
				var of []client.Test
				for _, t := range tests {
					if t.Content.ReferenceID == lr.ID {
						of = append(of, t)
					}
				}
				tests = of
			}
			sp, err := ss.chartSpec(specName, tests)
			if err != nil {
				return err
			}
			o := chart.Options{Units: ss.u.sys, Water: ss.setup.WaterDensity, Location: ss.loc}
			var ch *chart.Chart
			if run {
				ch, err = chart.RunChart(tests, sp, o)
			} else {
				ch, err = chart.MoistureDensity(lr, sp, tests, o)
			}
			if errors.Is(err, chart.ErrNoData) {
				return failf("nothing to draw: %v", err)
			}
			if err != nil {
				return err
			}
			if err := ch.WriteFile(out); err != nil {
				return err
			}
			_, err = fmt.Fprintf(cmd.OutOrStdout(), "chart %s written to %s: %s\n", quoted(strings.ReplaceAll(ch.Title, "\n", ", ")), out, strings.Join(ch.Series, "; "))
			return err
		},
	}
	c.Flags().StringVar(&ref, "reference", "", "the laboratory reference, by lab sample id, material or id")
	c.Flags().BoolVar(&run, "run", false, "draw relative compaction over time")
	c.Flags().StringVar(&specName, "spec", "", "the spec, by name or id (default: the one most of the tests name)")
	c.Flags().StringVar(&out, "out", "", "the file to write, .svg or .png (required)")
	_ = c.MarkFlagRequired("out")
	return c
}

// chartReference finds a reference by lab sample id, material or id.
func (ss *session) chartReference(given string) (client.LabReference, error) {
	var found []client.LabReference
	for _, r := range ss.s.References(ss.project) {
		if r.ID == given {
			return r, nil
		}
		if strings.EqualFold(r.LabSampleID, given) || strings.EqualFold(r.Material, given) {
			found = append(found, r)
		}
	}
	switch len(found) {
	case 1:
		return found[0], nil
	case 0:
		return client.LabReference{}, failf("--reference %s: no laboratory reference of that sample id or material in this project (tamp reference list)", quoted(given))
	}
	return client.LabReference{}, failf("--reference %s: %d references match; give the id", quoted(given), len(found))
}

// chartSpec finds the spec by name or id, or, when none is given, the one
// most of the tests name (the first by name on a tie). With no spec at all
// the chart is drawn without limits.
func (ss *session) chartSpec(given string, tests []client.Test) (client.Spec, error) {
	specs := ss.s.Specs(ss.project)
	if given != "" {
		for _, sp := range specs {
			if sp.ID == given || strings.EqualFold(sp.Name, given) {
				return sp, nil
			}
		}
		return client.Spec{}, failf("--spec %s: no spec of that name in this project", quoted(given))
	}
	count := map[string]int{}
	for _, t := range tests {
		if !t.Voided {
			count[t.Content.SpecID]++
		}
	}
	var best client.Spec
	for _, sp := range specs { // sorted by name
		if best.ID == "" || count[sp.ID] > count[best.ID] {
			best = sp
		}
	}
	return best, nil
}
