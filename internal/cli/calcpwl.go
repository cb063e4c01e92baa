package cli

import (
	"math"
	"strconv"
	"strings"

	"github.com/spf13/cobra"

	"tamp/internal/qc"
)

func newCalcPWL() *cobra.Command {
	var (
		values       string
		lower, upper float64
		asJSON       bool
	)
	c := &cobra.Command{
		Use:   "pwl",
		Short: "Estimate a lot's percent within limits from its test results",
		Long: `Estimate the percent of a lot within specification limits from a sample of
results (at least three), with the beta-distribution estimator of the
published PWL tables: Q_L = (mean - L) / s, Q_U = (U - mean) / s, s the
sample (n - 1) standard deviation, and PWL = PWL_L + PWL_U - 100 when both
limits are given. Results support, and never replace, review by qualified
personnel; the project's specifications govern acceptance.`,
		Example: `  tamp calc pwl --values 96.0,97.5,94.5,98.0,95.5 --lower 95
  tamp calc pwl --values -1.2,0.4,1.5,-0.3,2.4 --lower -2 --upper 2 --json`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			var vs []float64
			for i, s := range strings.Split(values, ",") {
				v, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
				if err != nil {
					return required("values", "item "+strconv.Itoa(i+1)+" ("+strconv.Quote(s)+") is not a number; give numbers separated by commas")
				}
				vs = append(vs, v)
			}
			var lp, up *float64
			if cmd.Flags().Changed("lower") {
				lp = &lower
			}
			if cmd.Flags().Changed("upper") {
				up = &upper
			}
			lot, err := qc.PercentWithinLimits(vs, lp, up)
			if err != nil {
				return inputError(cmd, err)
			}
			q := func(v float64) num { return some(v, 4) }
			out := pwlOut{N: lot.N, Mean: q(lot.Mean), StdDev: q(lot.StdDev),
				QualityLower: q(lot.QualityLower), QualityUpper: q(lot.QualityUpper),
				PWLLower: some(lot.PWLLower, 2), PWLUpper: some(lot.PWLUpper, 2), PWL: some(lot.PWL, 2)}
			if lp == nil {
				out.PWLLower = some(math.NaN(), 2)
			}
			if up == nil {
				out.PWLUpper = some(math.NaN(), 2)
			}
			if asJSON {
				return writeJSON(cmd.OutOrStdout(), out)
			}
			p := &printer{w: cmd.OutOrStdout()}
			p.f("Percent within limits, %d results\n", out.N)
			p.f("  %-24s %10s\n  %-24s %10s\n", "mean", out.Mean, "standard deviation (n-1)", out.StdDev)
			if lp != nil {
				p.f("  %-24s %10s   PWL_L %s %%\n", "quality index Q_L", out.QualityLower, out.PWLLower)
			}
			if up != nil {
				p.f("  %-24s %10s   PWL_U %s %%\n", "quality index Q_U", out.QualityUpper, out.PWLUpper)
			}
			p.f("  %-24s %10s %%\n", "percent within limits", out.PWL)
			p.f("\n%s\n", qc.Caution)
			return p.err
		},
	}
	fl := c.Flags()
	fl.StringVar(&values, "values", "", "the lot's results, separated by commas")
	fl.Float64Var(&lower, "lower", 0, "lower specification limit")
	fl.Float64Var(&upper, "upper", 0, "upper specification limit")
	fl.BoolVar(&asJSON, "json", false, "print one JSON object")
	_ = c.MarkFlagRequired("values")
	return c
}

type pwlOut struct {
	N            int `json:"n"`
	Mean         num `json:"mean"`
	StdDev       num `json:"std_dev"`
	QualityLower num `json:"quality_index_lower"`
	QualityUpper num `json:"quality_index_upper"`
	PWLLower     num `json:"pwl_lower"`
	PWLUpper     num `json:"pwl_upper"`
	PWL          num `json:"pwl"`
}
