package cli

import (
	"bytes"
	"fmt"
	"io"
	"os"
	"path/filepath"

	"github.com/spf13/cobra"

	"tamp/internal/exports"
	"tamp/internal/words"
)

// newQAExport is tamp qa export: the project's tests as CSV, their history
// as CSV and their positions as GeoJSON, from this device's copy of the
// ledger. f is the qa command's project flags.
func newQAExport(f *projectFlags) *cobra.Command {
	var testsPath, historyPath, geoPath string
	c := &cobra.Command{
		Use:   "export",
		Short: "Write the project's tests as CSV (one row per test, and its history) and GeoJSON",
		Long: `Write the project's tests, as this device holds them, to files for
spreadsheets and maps:

  --tests FILE.csv        one row per test, its current revision: every raw
                          reading, every computed value, verdict, review
  --history FILE.csv      one row per revision, void, review and exception
  --geojson FILE.geojson  the tests with a satellite position, as points
                          [longitude, latitude]; tests without one are
                          listed as skipped, never placed

Values are in the project's units (or --units) at the resolution the
methods report, the unit in each column's name. A text cell that starts
with = + - @ (or an apostrophe) is written with an apostrophe in front, so
a spreadsheet shows it as text and never runs it as a formula.`,
		Example: `  tamp qa export --tests tests.csv --history history.csv --geojson tests.geojson`,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			if testsPath == "" && historyPath == "" && geoPath == "" {
				return failf("name at least one file to write: --tests FILE.csv, --history FILE.csv or --geojson FILE.geojson")
			}
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			tests := ss.s.Tests(ss.project)
			sys := ss.u.sys
			w := cmd.OutOrStdout()
			if testsPath != "" {
				if err := writeFileAtomic("--tests", testsPath, func(out io.Writer) error { return exports.TestsCSV(out, tests, sys) }); err != nil {
					return err
				}
				fmt.Fprintf(w, "%d test(s) written to %s\n", len(tests), escape(testsPath))
			}
			if historyPath != "" {
				if err := writeFileAtomic("--history", historyPath, func(out io.Writer) error { return exports.HistoryCSV(out, tests, sys) }); err != nil {
					return err
				}
				fmt.Fprintf(w, "the history of %d test(s) written to %s\n", len(tests), escape(historyPath))
			}
			if geoPath != "" {
				var skipped []exports.Skipped
				err := writeFileAtomic("--geojson", geoPath, func(out io.Writer) error {
					var err error
					skipped, err = exports.TestsGeoJSON(out, tests, sys)
					return err
				})
				if err != nil {
					return err
				}
				fmt.Fprintf(w, "%d test location(s) written to %s\n", len(tests)-len(skipped), escape(geoPath))
				if len(skipped) > 0 {
					fmt.Fprintf(w, "%d test(s) left out of the map:\n", len(skipped))
					t := newTable(w, "TEST", "WHY")
					for _, s := range skipped {
						t.row(words.ShortID(s.TestID), s.Reason)
					}
					if err := t.flush(); err != nil {
						return err
					}
				}
			}
			return nil
		},
	}
	c.Flags().StringVar(&testsPath, "tests", "", "write the tests, one row each, to this CSV file")
	c.Flags().StringVar(&historyPath, "history", "", "write every test's history to this CSV file")
	c.Flags().StringVar(&geoPath, "geojson", "", "write the tests' positions to this GeoJSON file")
	return c
}

// writeFileAtomic writes path through write: into a temporary file beside
// it, renamed over path only once whole, so a failed export leaves no
// half-written file and an earlier one intact.
func writeFileAtomic(flag, path string, write func(io.Writer) error) error {
	var buf bytes.Buffer
	if err := write(&buf); err != nil {
		return err
	}
	tmp, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".*")
	if err != nil {
		return fmt.Errorf("%s: %w", flag, err)
	}
	_, err = tmp.Write(buf.Bytes())
	if cerr := tmp.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Rename(tmp.Name(), path)
	}
	if err != nil {
		os.Remove(tmp.Name())
		return fmt.Errorf("%s: %w", flag, err)
	}
	return nil
}
