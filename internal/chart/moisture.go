package chart

import (
	"fmt"
	"math"

	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"tamp/client"
	"tamp/internal/soil"
)

// curveSamples is how many segments draw a curve.
const curveSamples = 60

// MoistureDensity draws the moisture-density chart of one laboratory
// reference: its curve and points, the zero-air-voids line for its specific
// gravity, the spec's moisture window about the reference's optimum, the
// spec's minimum relative compaction as a dry density (maximum dry density x
// minimum / 100), and the field tests graded against the reference and the
// spec (voided ones left out), marked by verdict.
//
// The curve is the parabola soil.FitCurve fits near the peak, drawn across
// the points' moisture range; a reference without points is drawn as its
// reported peak alone. The grading values (LabReference.GradingMaxDryDensity
// and GradingOptimumMoisture) place the window and the limit. A reference
// with no maximum dry density returns ErrNoData; a spec limit that is not a
// number returns an error naming it.
func MoistureDensity(ref client.LabReference, spec client.Spec, tests []client.Test, o Options) (*Chart, error) {
	mdd, opt := ref.GradingMaxDryDensity, ref.GradingOptimumMoisture
	if mdd <= 0 {
		return nil, fmt.Errorf("%w: reference %s has no maximum dry density", ErrNoData, refLabel(ref))
	}
	sys := o.system()
	dens := func(v float64) float64 { return sys.FromSI(soil.Density, v) }
	c := newChart(fmt.Sprintf("Moisture-density: %s (%s)\nspec %s", refLabel(ref), ref.Standard, specLabel(spec)),
		"Moisture content, % of dry mass", "Dry density, "+sys.Unit(soil.Density))

	// The moisture range shown: the points, the window, the tests and the
	// optimum, with a margin.
	wLo, wHi := opt, opt
	grow := func(w float64) { wLo, wHi = math.Min(wLo, w), math.Max(wHi, w) }
	for _, p := range ref.Points {
		grow(p.Moisture)
	}
	var pass, fail, pending plotter.XYs
	for _, t := range tests {
		if t.Voided || t.Content.ReferenceID != ref.ID || (spec.ID != "" && t.Content.SpecID != spec.ID) || t.Result.DryDensity <= 0 {
			continue
		}
		xy := plotter.XY{X: t.Result.Moisture, Y: dens(t.Result.DryDensity)}
		grow(xy.X)
		switch t.Result.Verdict {
		case client.Pass:
			pass = append(pass, xy)
		case client.Fail:
			fail = append(fail, xy)
		default:
			pending = append(pending, xy)
		}
	}
	low, hasLow, err := limit("moisture_low", spec.MoistureLow)
	if err != nil {
		return nil, err
	}
	high, hasHigh, err := limit("moisture_high", spec.MoistureHigh)
	if err != nil {
		return nil, err
	}
	// The window in moisture: points about optimum, or percent of it.
	at := func(v float64) float64 {
		if spec.MoistureBasis == client.PercentOfOptimum {
			return opt * v / 100
		}
		return opt + v
	}
	if hasLow {
		grow(at(low))
	}
	if hasHigh {
		grow(at(high))
	}
	margin := math.Max(1, 0.1*(wHi-wLo))
	wLo, wHi = math.Max(0, wLo-margin), wHi+margin

	minRC, hasMin, err := limit("min_compaction", spec.MinCompaction)
	if err != nil {
		return nil, err
	}
	// The density range: from below the limit and the tests to above the
	// peak, leaving room for the legend.
	yLo, yHi := dens(mdd), dens(mdd)
	for _, set := range []plotter.XYs{pass, fail, pending} {
		for _, xy := range set {
			yLo, yHi = math.Min(yLo, xy.Y), math.Max(yHi, xy.Y)
		}
	}
	for _, p := range ref.Points {
		yLo = math.Min(yLo, dens(p.DryDensity))
	}
	if hasMin {
		yLo = math.Min(yLo, dens(mdd*minRC/100))
	}
	span := math.Max(yHi-yLo, dens(mdd)*0.02)
	yMin, yMax := yLo-0.15*span, yHi+0.15*span

	// The window first, so that everything else draws over it.
	if hasLow || hasHigh {
		a, b := wLo, wHi
		if hasLow {
			a = at(low)
		}
		if hasHigh {
			b = at(high)
		}
		yLo, yHi := yMin, yMax
		band, err := plotter.NewPolygon(plotter.XYs{{X: a, Y: yLo}, {X: b, Y: yLo}, {X: b, Y: yHi}, {X: a, Y: yHi}})
		if err != nil {
			return nil, fmt.Errorf("chart: %w", err)
		}
		band.Color = bandInk
		band.LineStyle.Width = 0
		c.p.Add(band)
		edge := draw.LineStyle{Color: ink, Width: vg.Points(1), Dashes: dashBand}
		var edges []*plotter.Line
		for _, w := range []float64{a, b} {
			if (w == a && !hasLow) || (w == b && !hasHigh) {
				continue
			}
			l, err := plotter.NewLine(plotter.XYs{{X: w, Y: yLo}, {X: w, Y: yHi}})
			if err != nil {
				return nil, fmt.Errorf("chart: %w", err)
			}
			l.LineStyle = edge
			c.p.Add(l)
			edges = append(edges, l)
		}
		unit := "points"
		if spec.MoistureBasis == client.PercentOfOptimum {
			unit = "% of optimum"
		}
		c.legend(fmt.Sprintf("Moisture window, %s to %s %s", orDash(spec.MoistureLow), orDash(spec.MoistureHigh), unit), band, edges[0])
	}

	// Zero air voids: the dry density at saturation, rho_d = Gs x rho_w /
	// (1 + w Gs / 100), with w in percent (soil.ZeroAirVoids).
	if gs := ref.SpecificGravity; gs > 0 {
		zav := make(plotter.XYs, 0, curveSamples+1)
		for i := 0; i <= curveSamples; i++ {
			w := wLo + (wHi-wLo)*float64(i)/curveSamples
			d, err := soil.ZeroAirVoids(gs, w, o.water())
			if err != nil {
				return nil, fmt.Errorf("chart: zero air voids: %w", err)
			}
			zav = append(zav, plotter.XY{X: w, Y: dens(d)})
		}
		l, err := plotter.NewLine(zav)
		if err != nil {
			return nil, fmt.Errorf("chart: %w", err)
		}
		l.LineStyle = draw.LineStyle{Color: otherInk, Width: vg.Points(1.2), Dashes: dashZAV}
		c.p.Add(l)
		c.legend(fmt.Sprintf("Zero air voids, Gs %.2f", gs), l)
	}

	// The laboratory curve and its points.
	if len(ref.Points) >= soil.MinCurvePoints {
		pts := make([]soil.CurvePoint, len(ref.Points))
		lo, hi := math.Inf(1), math.Inf(-1)
		for i, p := range ref.Points {
			pts[i] = soil.CurvePoint{Moisture: p.Moisture, DryDensity: p.DryDensity}
			lo, hi = math.Min(lo, p.Moisture), math.Max(hi, p.Moisture)
		}
		fit, err := soil.FitCurve(soil.Curve{Procedure: soil.Procedure{Standard: soil.Standard(ref.Standard), Method: ref.Method, Edition: ref.Edition}, Points: pts})
		if err == nil {
			curve := make(plotter.XYs, 0, curveSamples+1)
			for i := 0; i <= curveSamples; i++ {
				w := lo + (hi-lo)*float64(i)/curveSamples
				curve = append(curve, plotter.XY{X: w, Y: dens(fit.At(w))})
			}
			l, err := plotter.NewLine(curve)
			if err != nil {
				return nil, fmt.Errorf("chart: %w", err)
			}
			l.LineStyle = draw.LineStyle{Color: ink, Width: vg.Points(1.6)}
			c.p.Add(l)
			c.legend("Laboratory curve (fitted)", l)
		}
	}
	if len(ref.Points) > 0 {
		xys := make(plotter.XYs, len(ref.Points))
		for i, p := range ref.Points {
			xys[i] = plotter.XY{X: p.Moisture, Y: dens(p.DryDensity)}
		}
		sc, err := plotter.NewScatter(xys)
		if err != nil {
			return nil, fmt.Errorf("chart: %w", err)
		}
		sc.GlyphStyle = draw.GlyphStyle{Color: ink, Radius: vg.Points(3.5), Shape: draw.SquareGlyph{}}
		// A white centre keeps the open square open over the band and lines.
		c.p.Add(whiteBoxes(xys), sc)
		c.legend(fmt.Sprintf("Laboratory points (%d)", len(xys)), sc)
	}
	peak, err := plotter.NewScatter(plotter.XYs{{X: opt, Y: dens(mdd)}})
	if err != nil {
		return nil, fmt.Errorf("chart: %w", err)
	}
	peak.GlyphStyle = draw.GlyphStyle{Color: ink, Radius: vg.Points(5), Shape: draw.PyramidGlyph{}}
	c.p.Add(peak)
	c.legend(fmt.Sprintf("Max. dry density %.*f %s, optimum %.1f %%", sys.Places(soil.Density), dens(mdd), sys.Unit(soil.Density), opt), peak)

	// The minimum relative compaction as a dry density.
	if hasMin {
		y := dens(mdd * minRC / 100)
		l, err := plotter.NewLine(plotter.XYs{{X: wLo, Y: y}, {X: wHi, Y: y}})
		if err != nil {
			return nil, fmt.Errorf("chart: %w", err)
		}
		l.LineStyle = draw.LineStyle{Color: limitInk, Width: vg.Points(1.4), Dashes: dashLimit}
		c.p.Add(l)
		c.legend(fmt.Sprintf("Min. relative compaction %s %% = %.*f %s", spec.MinCompaction, sys.Places(soil.Density), y, sys.Unit(soil.Density)), l)
	}

	if err := c.verdictSeries(pass, fail, pending); err != nil {
		return nil, err
	}
	// The ranges last: adding a line widens them to its data.
	c.p.X.Min, c.p.X.Max = wLo, wHi
	c.p.Y.Min, c.p.Y.Max = yMin, yMax
	return c, nil
}

// whiteBoxes fills the laboratory points' boxes white.
func whiteBoxes(xys plotter.XYs) *plotter.Scatter {
	sc, _ := plotter.NewScatter(xys) // xys were accepted once already
	sc.GlyphStyle = draw.GlyphStyle{Color: whiteInk, Radius: vg.Points(3), Shape: draw.BoxGlyph{}}
	return sc
}

// refLabel names a reference for a title.
func refLabel(ref client.LabReference) string {
	switch {
	case ref.Material != "" && ref.LabSampleID != "":
		return ref.Material + " " + ref.LabSampleID
	case ref.Material != "":
		return ref.Material
	}
	return ref.LabSampleID
}

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}
