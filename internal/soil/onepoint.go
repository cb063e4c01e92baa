package soil

import (
	"fmt"
	"slices"

	"tamp/internal/valid"
)

// FamilyCurve is one laboratory curve of a family, with the peak the
// laboratory reported for it.
type FamilyCurve struct {
	Name            string
	MaxDryDensity   float64 // kg/m3
	OptimumMoisture float64 // percent
	Points          []CurvePoint
}

// Family is a family of compaction curves of one procedure, for one-point
// checks (AASHTO T 272, built as AASHTO R 75 describes). A family is data:
// each project or agency keeps its own.
type Family struct {
	Name      string
	Procedure Procedure
	Curves    []FamilyCurve
}

// MinFamilyCurves is the fewest curves a family may hold: three of one
// method (AASHTO R 75 sec. 4).
const MinFamilyCurves = 3

// The one-point rule of AASHTO T 272 (WAQTC FOP): the point's moisture must
// lie at 80-100 % of the optimum moisture of the curve it selects.
const (
	OnePointLowPercent  = 80.0
	OnePointHighPercent = 100.0
)

// OnePoint is the reference a one-point check selects.
type OnePoint struct {
	MaxDryDensity   float64 // kg/m3
	OptimumMoisture float64 // percent
	// Below and Above name the family curves the point lies between (equal
	// when it lies on one), and Fraction how far from Below to Above.
	Below, Above string
	Fraction     float64
	// PercentOfOptimum is the point's moisture as a percent of the selected
	// optimum.
	PercentOfOptimum float64
}

// OnePoint selects a maximum dry density and optimum moisture for a one-point
// specimen of moisture w (percent) and dry density dry (kg/m3), compacted by
// the family's procedure. At the point's moisture each curve is evaluated
// (from a parabola fitted to its points); the point is placed between the two
// curves it lies between and their peaks are interpolated in proportion.
// It returns an error when the family has fewer than three curves, the point
// lies outside the family, or the point's moisture is not 80-100 % of the
// selected optimum (dry the specimen or add water and recompact).
func (f Family) OnePoint(w, dry float64) (OnePoint, error) {
	if len(f.Curves) < MinFamilyCurves {
		return OnePoint{}, fmt.Errorf("soil: one-point: %w", valid.Fail("family.curves", float64(len(f.Curves)),
			"a family needs at least 3 curves of one method (AASHTO R 75 sec. 4)"))
	}
	if err := valid.First(checkMoisture("moisture", w), valid.Positive("dry_density", dry)); err != nil {
		return OnePoint{}, fmt.Errorf("soil: one-point: %w", err)
	}
	type at struct {
		c   FamilyCurve
		dry float64
	}
	var curves []at
	for i, c := range f.Curves {
		if err := valid.First(valid.Positive(fmt.Sprintf("family.curves[%d].max_dry_density", i), c.MaxDryDensity),
			checkMoisture(fmt.Sprintf("family.curves[%d].optimum_moisture", i), c.OptimumMoisture),
			valid.Positive(fmt.Sprintf("family.curves[%d].optimum_moisture", i), c.OptimumMoisture)); err != nil {
			return OnePoint{}, fmt.Errorf("soil: one-point: %w", err)
		}
		fit, err := FitCurve(Curve{Procedure: f.Procedure, Points: c.Points})
		if err != nil {
			return OnePoint{}, fmt.Errorf("soil: one-point: curve %q: %w", c.Name, err)
		}
		curves = append(curves, at{c, fit.At(w)})
	}
	slices.SortFunc(curves, func(a, b at) int { return cmpFloat(a.dry, b.dry) })
	lowest, highest := curves[0], curves[len(curves)-1]
	if dry < lowest.dry || dry > highest.dry {
		return OnePoint{}, fmt.Errorf("soil: one-point: %w", valid.Fail("dry_density", dry,
			fmt.Sprintf("lies outside the family %q at this moisture; run a full curve", f.Name)))
	}
	var r OnePoint
	for i := 0; i+1 < len(curves); i++ {
		a, b := curves[i], curves[i+1]
		if dry < a.dry || dry > b.dry {
			continue
		}
		t := 0.0
		if b.dry > a.dry {
			t = (dry - a.dry) / (b.dry - a.dry)
		}
		r = OnePoint{
			MaxDryDensity:   a.c.MaxDryDensity + t*(b.c.MaxDryDensity-a.c.MaxDryDensity),
			OptimumMoisture: a.c.OptimumMoisture + t*(b.c.OptimumMoisture-a.c.OptimumMoisture),
			Below:           a.c.Name, Above: b.c.Name, Fraction: t,
		}
		if t == 0 {
			r.Above = a.c.Name
		} else if t == 1 {
			r.Below = b.c.Name
		}
		break
	}
	r.PercentOfOptimum = 100 * w / r.OptimumMoisture
	if r.PercentOfOptimum < OnePointLowPercent || r.PercentOfOptimum > OnePointHighPercent {
		return OnePoint{}, fmt.Errorf("soil: one-point: %w", valid.Fail("moisture", w,
			fmt.Sprintf("is %.0f %% of the selected optimum %.1f %%; a one-point must be at 80-100 %% of optimum (AASHTO T 272)", r.PercentOfOptimum, r.OptimumMoisture)))
	}
	return r, nil
}
