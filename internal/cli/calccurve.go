package cli

import (
	"cmp"
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
	"strconv"
	"strings"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"tamp/internal/ledger"
	"tamp/internal/qc"
	"tamp/internal/soil"
	"tamp/internal/valid"
)

// Flag codes of a fitted curve: what a reviewer must look at. They never
// change the fit.
const (
	curveUnbracketed       = "unbracketed_curve"
	curveAboveZeroAirVoids = qc.AboveZeroAirVoids
)

func newCalcCurve() *cobra.Command {
	var (
		units, points string
		gs, water     float64
		asJSON        bool
	)
	c := &cobra.Command{
		Use:   "curve",
		Short: "Fit a laboratory compaction curve: maximum dry density and optimum moisture",
		Long: `Fit a laboratory moisture-density (compaction) curve and report its maximum
dry density and optimum moisture, with no project or server.

--points lists the compacted specimens as MOISTURE:DRY_DENSITY pairs separated
by commas: moisture in percent of dry mass, dry density in pcf (us) or kg/m3
(si). A parabola is fitted by least squares to the highest point and up to two
points either side of it; its peak is the maximum dry density and the moisture
there the optimum, reported to 0.1 pcf or 1 kg/m3 and to 0.1 %. Three points
with different moistures are the fewest fitted; the laboratory standards ask
for more, either side of optimum.

Flags for review (they do not change the fit):
  unbracketed_curve     the highest point is the driest or the wettest, or the
                        fitted peak lies outside the points' moistures: the
                        peak is extrapolated; compact a point on the side named
  above_zero_air_voids  (with --gs) a point lies above the zero-air-voids
                        density at its moisture: check its moisture and the Gs

A dry density no soil can have (outside 500 to 3500 kg/m3, or at or above the
solids' density Gs x water when --gs is given) is refused, not fitted.

Results support, and never replace, review by qualified personnel; the
project's specifications and local codes govern every acceptance limit.`,
		Example: `  tamp calc curve --points 11:100.4,13:107.6,15:110.0,17:107.6,19:100.4
  tamp calc curve --units si --points 10:1800,13:1900,16:1840 --gs 2.70 --json`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			sys, err := soil.ParseSystem(units)
			if err != nil {
				return inputError(cmd, err)
			}
			w := soil.Water624
			if sys == soil.SI {
				w = soil.Water1000
			}
			if cmd.Flags().Changed("water-density") {
				if err := valid.Positive("water_density", water); err != nil {
					return inputError(cmd, err)
				}
				w = sys.ToSI(soil.Density, water)
			}
			if cmd.Flags().Changed("gs") {
				if err := valid.Range("gs", gs, soil.MinGs, soil.MaxGs, ""); err != nil {
					return inputError(cmd, err)
				}
			}
			out, err := fitCurve(sys, points, gs, w)
			if err != nil {
				return err
			}
			if asJSON {
				return writeJSON(cmd.OutOrStdout(), out)
			}
			return out.text(cmd.OutOrStdout())
		},
	}
	fl := c.Flags()
	fl.StringVar(&units, "units", "us", "unit system: us (pcf) or si (kg/m3)")
	fl.StringVar(&points, "points", "", "the curve's points as MOISTURE:DRY_DENSITY pairs separated by commas (e.g. 11:100.4,13:107.6,15:110.0)")
	fl.Float64Var(&gs, "gs", 0, "specific gravity of the soil solids, for the zero-air-voids check")
	fl.Float64Var(&water, "water-density", 0, "density of water, pcf or kg/m3 (default 62.4 pcf or 1000 kg/m3)")
	fl.BoolVar(&asJSON, "json", false, "print one JSON object")
	_ = c.MarkFlagRequired("points")
	_ = c.RegisterFlagCompletionFunc("units", cobra.FixedCompletions([]string{"us", "si"}, cobra.ShellCompDirectiveNoFileComp))
	return c
}

// fitCurve parses points (in sys's units), refuses what no soil can be,
// fits the curve and raises its flags; gs is zero when not given, water is
// in kg/m3.
func fitCurve(sys soil.System, points string, gs, water float64) (*curveOut, error) {
	items := strings.Split(points, ",")
	curve := soil.Curve{Points: make([]soil.CurvePoint, len(items))}
	for i, item := range items {
		ws, ds, ok := strings.Cut(strings.TrimSpace(item), ":")
		w, werr := strconv.ParseFloat(strings.TrimSpace(ws), 64)
		d, derr := strconv.ParseFloat(strings.TrimSpace(ds), 64)
		if !ok || werr != nil || derr != nil {
			return nil, fmt.Errorf("--points: point %d (%q) is not MOISTURE:DRY_DENSITY: give numbers such as 12.5:110.2, pairs separated by commas",
				i+1, item)
		}
		p := soil.CurvePoint{Moisture: w, DryDensity: sys.ToSI(soil.Density, d)}
		if p.DryDensity < ledger.MinDensity || p.DryDensity > ledger.MaxDensity {
			return nil, fmt.Errorf("--points: point %d (%q): a dry density of %s is outside %s: %s", i+1, item,
				calcShow(sys, soil.Density, p.DryDensity), calcRange(sys, soil.Density, ledger.MinDensity, ledger.MaxDensity), calcDensityWhy)
		}
		if err := checkCalcSolids(sys, fmt.Sprintf("--points: point %d (%q): a dry density", i+1, item), p.DryDensity, gs, water, "the point"); err != nil {
			return nil, err
		}
		curve.Points[i] = p
	}
	if gs != 0 {
		curve.Gs, curve.Water = gs, water
	}
	fit, err := soil.FitCurve(curve)
	if err != nil {
		return nil, curveError(items, err)
	}

	d := func(v float64) num { return some(sys.FromSI(soil.Density, v), sys.Places(soil.Density)) }
	o := &curveOut{
		Units: sys.String(), PointsUsed: fit.Used, sys: sys,
		MaxDryDensity: d(fit.MaxDryDensity), OptimumMoisture: some(fit.OptimumMoisture, 1), Bracketed: fit.Bracketed,
		Flags: []qc.Finding{}, Cautions: []string{qc.Caution},
		Unrounded: map[string]float64{
			"max_dry_density":  math.Round(sys.FromSI(soil.Density, fit.MaxDryDensity)*1e9) / 1e9,
			"optimum_moisture": math.Round(fit.OptimumMoisture*1e9) / 1e9,
		},
	}
	sorted := slices.Clone(curve.Points)
	slices.SortStableFunc(sorted, func(a, b soil.CurvePoint) int { return cmp.Compare(a.Moisture, b.Moisture) })
	for _, p := range sorted {
		po := curvePointOut{Moisture: some(p.Moisture, 1), DryDensity: d(p.DryDensity)}
		if gs != 0 {
			zav, err := soil.ZeroAirVoids(gs, p.Moisture, water)
			if err != nil {
				return nil, err
			}
			z := d(zav)
			po.ZeroAirVoidsDensity = &z
		}
		o.Points = append(o.Points, po)
	}
	if !fit.Bracketed {
		o.flag(curveUnbracketed, unbracketedMessage(sys, sorted, fit))
	}
	for _, i := range fit.AboveZAV {
		p := curve.Points[i]
		zav, _ := soil.ZeroAirVoids(gs, p.Moisture, water) // checked above
		o.flag(curveAboveZeroAirVoids, fmt.Sprintf("point %d (%.1f %%, %s) lies above the zero-air-voids density %s for Gs %s at that moisture "+
			"(saturation above 100 %%, which is impossible): check its moisture and the Gs",
			i+1, p.Moisture, calcShow(sys, soil.Density, p.DryDensity), calcShow(sys, soil.Density, zav), strconv.FormatFloat(gs, 'g', -1, 64)))
	}
	return o, nil
}

// unbracketedMessage says why a fit does not bracket its peak and on which
// side a point is missing; pts are sorted by moisture.
func unbracketedMessage(sys soil.System, pts []soil.CurvePoint, fit soil.Fit) string {
	top := 0
	for i, p := range pts {
		if p.DryDensity > pts[top].DryDensity {
			top = i
		}
	}
	lo, hi := pts[0].Moisture, pts[len(pts)-1].Moisture
	var why []string
	side := "wetter"
	switch top {
	case 0:
		why, side = append(why, fmt.Sprintf("the highest point (%.1f %%, %s) is the driest", pts[top].Moisture, calcShow(sys, soil.Density, pts[top].DryDensity))), "drier"
	case len(pts) - 1:
		why = append(why, fmt.Sprintf("the highest point (%.1f %%, %s) is the wettest", pts[top].Moisture, calcShow(sys, soil.Density, pts[top].DryDensity)))
	}
	if fit.OptimumMoisture <= lo || fit.OptimumMoisture >= hi {
		why = append(why, fmt.Sprintf("the fitted peak (%.1f %%) lies outside the points' moistures (%.1f to %.1f %%)", fit.OptimumMoisture, lo, hi))
		if fit.OptimumMoisture <= lo {
			side = "drier"
		}
	}
	return fmt.Sprintf("%s: the curve does not bracket optimum, so its maximum dry density and optimum moisture are extrapolated; "+
		"compact a %s point", strings.Join(why, ", and "), side)
}

// curveError puts an error of soil.FitCurve in the command line's words,
// naming the point as typed.
func curveError(items []string, err error) error {
	var fe *valid.FieldError
	if !errors.As(err, &fe) {
		return err
	}
	if rest, ok := strings.CutPrefix(fe.Field, "points["); ok {
		idx, field, _ := strings.Cut(rest, "].")
		if i, aerr := strconv.Atoi(idx); aerr == nil && i >= 0 && i < len(items) {
			return fmt.Errorf("--points: point %d (%q): %s %s: %s", i+1, items[i], strings.ReplaceAll(field, "_", " "), fe.Value, fe.Rule)
		}
	}
	switch fe.Field {
	case "points.moisture":
		return fmt.Errorf("--points: moisture %s %%: %s", fe.Value, fe.Rule)
	case "points":
		if fe.Value != "" {
			return fmt.Errorf("--points: %s points given: %s", fe.Value, fe.Rule)
		}
		return fmt.Errorf("--points: the points %s", fe.Rule)
	}
	return err
}

type curvePointOut struct {
	Moisture            num  `json:"moisture"`
	DryDensity          num  `json:"dry_density"`
	ZeroAirVoidsDensity *num `json:"zero_air_voids_density,omitempty"`
}

type curveOut struct {
	Units           string             `json:"units"`
	Points          []curvePointOut    `json:"points"`
	PointsUsed      int                `json:"points_used"`
	MaxDryDensity   num                `json:"max_dry_density"`
	OptimumMoisture num                `json:"optimum_moisture"`
	Bracketed       bool               `json:"bracketed"`
	Flags           []qc.Finding       `json:"flags"`
	Unrounded       map[string]float64 `json:"unrounded"`
	Cautions        []string           `json:"cautions"`

	sys soil.System
}

func (o *curveOut) flag(code, msg string) {
	o.Flags = append(o.Flags, qc.Finding{Code: code, Message: msg})
}

func (o *curveOut) text(w io.Writer) error {
	du, unitName := o.sys.Unit(soil.Density), "US customary"
	if o.sys == soil.SI {
		unitName = "SI"
	}
	p := &printer{w: w}
	p.f("Compaction curve, %s units\n", unitName)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	zav := len(o.Points) > 0 && o.Points[0].ZeroAirVoidsDensity != nil
	if p.err == nil {
		header := "  moisture %\tdry density " + du + "\t"
		if zav {
			header += "zero-air-voids " + du + "\t"
		}
		_, p.err = fmt.Fprintln(tw, header)
	}
	for _, pt := range o.Points {
		if p.err != nil {
			break
		}
		row := "  " + pt.Moisture.String() + "\t" + pt.DryDensity.String() + "\t"
		if zav {
			row += pt.ZeroAirVoidsDensity.String() + "\t"
		}
		_, p.err = fmt.Fprintln(tw, row)
	}
	if p.err == nil {
		p.err = tw.Flush()
	}
	bracketed := "yes"
	if !o.Bracketed {
		bracketed = "no"
	}
	p.f("Parabola fitted to %d points around the highest\n", o.PointsUsed)
	p.f("  %-24s %10s %s\n", "maximum dry density", o.MaxDryDensity, du)
	p.f("  %-24s %10s %%\n", "optimum moisture", o.OptimumMoisture)
	p.f("  %-24s %10s\n", "bracketed", bracketed)
	if len(o.Flags) > 0 {
		p.f("For review (flags do not change the fit):\n")
		for _, fl := range o.Flags {
			p.f("  - [%s] %s\n", fl.Code, fl.Message)
		}
	}
	res := "0.1 pcf"
	if o.sys == soil.SI {
		res = "1 kg/m3"
	}
	p.f("\nMaximum dry density is reported to %s and optimum moisture to 0.1 %%.\n", res)
	for _, c := range o.Cautions {
		p.f("%s\n", c)
	}
	return p.err
}
