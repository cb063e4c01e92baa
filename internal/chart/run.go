package chart

import (
	"fmt"
	"math"
	"slices"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"tamp/client"
)

// RunChart draws the relative compaction of tests over time: each test at
// the time its device took it, joined in time order by a thin line, marked
// by verdict, with the spec's minimum as a line. When spec.ID is set only
// the tests graded against that spec are drawn; voided tests and tests
// with no relative compaction are left out. With no test to draw it returns
// ErrNoData.
func RunChart(tests []client.Test, spec client.Spec, o Options) (*Chart, error) {
	var shown []client.Test
	for _, t := range tests {
		if t.Voided || t.Result.RelativeCompaction <= 0 || (spec.ID != "" && t.Content.SpecID != spec.ID) {
			continue
		}
		shown = append(shown, t)
	}
	if len(shown) == 0 {
		return nil, fmt.Errorf("%w: no graded test against spec %s", ErrNoData, specLabel(spec))
	}
	slices.SortStableFunc(shown, func(a, b client.Test) int { return a.Taken.Compare(b.Taken) })
	loc := o.Location
	if loc == nil {
		loc = time.UTC
	}
	c := newChart(fmt.Sprintf("Relative compaction over time\nspec %s", specLabel(spec)),
		"Time taken ("+zoneName(loc, shown[0].Taken)+")", "Relative compaction, %")
	c.p.X.Tick.Marker = plot.TimeTicks{Format: "Jan 2\n15:04", Time: plot.UnixTimeIn(loc)}

	x := func(t time.Time) float64 { return float64(t.Unix()) }
	all := make(plotter.XYs, 0, len(shown))
	var pass, fail, pending plotter.XYs
	yLo, yHi := math.Inf(1), math.Inf(-1)
	for _, t := range shown {
		xy := plotter.XY{X: x(t.Taken), Y: t.Result.RelativeCompaction}
		all = append(all, xy)
		yLo, yHi = math.Min(yLo, xy.Y), math.Max(yHi, xy.Y)
		switch t.Result.Verdict {
		case client.Pass:
			pass = append(pass, xy)
		case client.Fail:
			fail = append(fail, xy)
		default:
			pending = append(pending, xy)
		}
	}
	xLo, xHi := all[0].X, all[len(all)-1].X
	pad := math.Max(1800, 0.05*(xHi-xLo)) // half an hour at least
	c.p.X.Min, c.p.X.Max = xLo-pad, xHi+pad

	if len(all) > 1 {
		l, err := plotter.NewLine(all)
		if err != nil {
			return nil, fmt.Errorf("chart: %w", err)
		}
		l.LineStyle = draw.LineStyle{Color: otherInk, Width: vg.Points(0.7)}
		c.p.Add(l)
		c.legend("Tests in time order", l)
	}
	minRC, hasMin, err := limit("min_compaction", spec.MinCompaction)
	if err != nil {
		return nil, err
	}
	if hasMin {
		l, err := plotter.NewLine(plotter.XYs{{X: c.p.X.Min, Y: minRC}, {X: c.p.X.Max, Y: minRC}})
		if err != nil {
			return nil, fmt.Errorf("chart: %w", err)
		}
		l.LineStyle = draw.LineStyle{Color: limitInk, Width: vg.Points(1.4), Dashes: dashLimit}
		c.p.Add(l)
		c.legend(fmt.Sprintf("Min. relative compaction %s %%", spec.MinCompaction), l)
		yLo, yHi = math.Min(yLo, minRC), math.Max(yHi, minRC)
	}
	if err := c.verdictSeries(pass, fail, pending); err != nil {
		return nil, err
	}
	span := math.Max(yHi-yLo, 2)
	c.p.Y.Min, c.p.Y.Max = yLo-0.15*span, yHi+0.15*span
	return c, nil
}

// zoneName names the time axis's zone, as of the first test.
func zoneName(loc *time.Location, at time.Time) string {
	name, _ := at.In(loc).Zone()
	if loc.String() != "UTC" && loc.String() != "Local" {
		return loc.String() + ", " + name
	}
	return name
}
