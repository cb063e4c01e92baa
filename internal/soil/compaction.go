package soil

import (
	"fmt"
	"slices"
	"strings"

	"gonum.org/v1/gonum/mat"

	"tamp/internal/valid"
)

// Standard is a laboratory compaction test standard.
type Standard string

// The compaction standards tamp knows. D698 and T 99 are standard effort;
// D1557 and T 180 are modified effort.
const (
	ASTMD698   Standard = "ASTM D698"
	ASTMD1557  Standard = "ASTM D1557"
	AASHTOT99  Standard = "AASHTO T 99"
	AASHTOT180 Standard = "AASHTO T 180"
)

// Modified reports whether s is a modified-effort test.
func (s Standard) Modified() bool { return s == ASTMD1557 || s == AASHTOT180 }

// Procedure names one laboratory compaction procedure: standard, method
// letter and edition year.
type Procedure struct {
	Standard Standard
	Method   string // "A" to "D"
	Edition  int    // year of the edition, e.g. 2012; zero if unknown
}

func (p Procedure) String() string {
	s := fmt.Sprintf("%s method %s", p.Standard, p.Method)
	if p.Edition != 0 {
		s += fmt.Sprintf(" (%d)", p.Edition)
	}
	return s
}

// MethodScope is what a compaction method admits.
type MethodScope struct {
	Mould       string  // mould diameter as written in the standard
	Blows       int     // blows per layer
	Sieve       string  // the sieve the tested material passes
	MaxOversize float64 // largest percent retained on that sieve the method allows
}

// scopes of ASTM D698 / D1557 methods A/B/C in the 2012 edition (D698-12
// sec. 1.3: at most 25 / 25 / 30 % oversize) and of AASHTO T 99 / T 180
// methods A-D (T 99-17). The AASHTO oversize limits are from memory: the
// methods replace or correct coarse material rather than cap it, and 5 %
// retained on the 19.0 mm sieve is the usual threshold for correction.
var scopes = map[Standard]map[string]MethodScope{
	ASTMD698: {
		"A": {"4 in (101.6 mm)", 25, "No. 4 (4.75 mm)", 25},
		"B": {"4 in (101.6 mm)", 25, "3/8 in (9.5 mm)", 25},
		"C": {"6 in (152.4 mm)", 56, "3/4 in (19.0 mm)", 30},
	},
	ASTMD1557: {
		"A": {"4 in (101.6 mm)", 25, "No. 4 (4.75 mm)", 25},
		"B": {"4 in (101.6 mm)", 25, "3/8 in (9.5 mm)", 25},
		"C": {"6 in (152.4 mm)", 56, "3/4 in (19.0 mm)", 30},
	},
	AASHTOT99: {
		"A": {"4 in (101.6 mm)", 25, "No. 4 (4.75 mm)", 40},
		"B": {"6 in (152.4 mm)", 56, "No. 4 (4.75 mm)", 40},
		"C": {"4 in (101.6 mm)", 25, "3/4 in (19.0 mm)", 30},
		"D": {"6 in (152.4 mm)", 56, "3/4 in (19.0 mm)", 30},
	},
}

func init() { scopes[AASHTOT180] = scopes[AASHTOT99] }

// Scope returns what p's method admits. Editions of ASTM D698 / D1557 before
// 2007 allowed at most 20 % oversize for methods A and B (D698-00).
func (p Procedure) Scope() (MethodScope, error) {
	methods, ok := scopes[p.Standard]
	if !ok {
		return MethodScope{}, fmt.Errorf("soil: %w", valid.Missing("standard", fmt.Sprintf("must be one of ASTM D698, ASTM D1557, AASHTO T 99, AASHTO T 180, not %q", p.Standard)))
	}
	sc, ok := methods[strings.ToUpper(p.Method)]
	if !ok {
		letters := make([]string, 0, len(methods))
		for k := range methods {
			letters = append(letters, k)
		}
		slices.Sort(letters)
		return MethodScope{}, fmt.Errorf("soil: %w", valid.Missing("method", fmt.Sprintf("%s has methods %s, not %q", p.Standard, strings.Join(letters, ", "), p.Method)))
	}
	if (p.Standard == ASTMD698 || p.Standard == ASTMD1557) && p.Edition != 0 && p.Edition < 2007 && sc.MaxOversize == 25 {
		sc.MaxOversize = 20
	}
	return sc, nil
}

// CurvePoint is one compacted specimen of a laboratory curve.
type CurvePoint struct {
	Moisture   float64 // percent
	DryDensity float64 // kg/m3
}

// Curve is a laboratory moisture-density relation.
type Curve struct {
	Procedure Procedure
	Points    []CurvePoint
	// Gs, when set, lets points lying above the zero-air-voids curve be found.
	Gs    float64
	Water float64 // kg/m3; needed with Gs
}

// Fit is the maximum dry density and optimum moisture fitted to a curve.
type Fit struct {
	MaxDryDensity   float64    // kg/m3, the fitted peak
	OptimumMoisture float64    // percent, the moisture at the fitted peak
	Coefficients    [3]float64 // dry = c0 + c1 w + c2 w^2 near the peak
	// Bracketed is false when the highest measured point is the driest or
	// wettest one, or the fitted peak lies outside the points' moisture range:
	// the curve does not show where the peak is.
	Bracketed bool
	// AboveZAV lists the indexes of points above the zero-air-voids curve
	// (only when the curve's Gs is given); such points are impossible as
	// measured and need checking.
	AboveZAV []int
	// Used is how many points, around the highest, the parabola was fitted to.
	Used int
}

// MinCurvePoints is the fewest points tamp fits: three define a parabola.
// ASTM D698 asks for at least four, two either side of optimum (from memory).
const MinCurvePoints = 3

// FitCurve fits a parabola by least squares to the highest measured point
// and up to two points either side of it, and returns its peak. It returns
// an error for fewer than three points, repeated moistures, or points that
// show no peak (a parabola that opens upward or is flat).
func FitCurve(c Curve) (Fit, error) {
	if len(c.Points) < MinCurvePoints {
		return Fit{}, fmt.Errorf("soil: fit curve: %w", valid.Fail("points", float64(len(c.Points)), "a compaction curve needs at least 3 points"))
	}
	pts := slices.Clone(c.Points)
	for i, p := range pts {
		if err := valid.First(checkMoisture(fmt.Sprintf("points[%d].moisture", i), p.Moisture),
			valid.Positive(fmt.Sprintf("points[%d].dry_density", i), p.DryDensity)); err != nil {
			return Fit{}, fmt.Errorf("soil: fit curve: %w", err)
		}
	}
	slices.SortFunc(pts, func(a, b CurvePoint) int { return cmpFloat(a.Moisture, b.Moisture) })
	for i := 1; i < len(pts); i++ {
		if pts[i].Moisture == pts[i-1].Moisture {
			return Fit{}, fmt.Errorf("soil: fit curve: %w", valid.Fail("points.moisture", pts[i].Moisture, "each point must have a different moisture"))
		}
	}
	top := 0
	for i, p := range pts {
		if p.DryDensity > pts[top].DryDensity {
			top = i
		}
	}
	lo, hi := max(0, top-2), min(len(pts), top+3)
	for hi-lo < 3 { // widen to three points at an end
		if lo > 0 {
			lo--
		} else {
			hi++
		}
	}
	window := pts[lo:hi]
	coef, err := fitQuadratic(window)
	if err != nil {
		return Fit{}, err
	}
	if coef[2] >= 0 {
		return Fit{}, fmt.Errorf("soil: fit curve: %w", valid.Missing("points", "show no peak: dry density does not rise then fall with moisture"))
	}
	wOpt := -coef[1] / (2 * coef[2])
	f := Fit{
		OptimumMoisture: wOpt,
		MaxDryDensity:   coef[0] + coef[1]*wOpt + coef[2]*wOpt*wOpt,
		Coefficients:    coef,
		Used:            len(window),
		Bracketed:       top != 0 && top != len(pts)-1 && wOpt > pts[0].Moisture && wOpt < pts[len(pts)-1].Moisture,
	}
	if c.Gs != 0 {
		for i, p := range c.Points {
			zav, err := ZeroAirVoids(c.Gs, p.Moisture, c.Water)
			if err != nil {
				return Fit{}, fmt.Errorf("soil: fit curve: %w", err)
			}
			if p.DryDensity > zav {
				f.AboveZAV = append(f.AboveZAV, i)
			}
		}
	}
	return f, nil
}

// fitQuadratic returns c with dry = c0 + c1 w + c2 w^2 fitted by least
// squares (QR), centring moisture for conditioning.
func fitQuadratic(pts []CurvePoint) ([3]float64, error) {
	var mean float64
	for _, p := range pts {
		mean += p.Moisture
	}
	mean /= float64(len(pts))
	a := mat.NewDense(len(pts), 3, nil)
	b := mat.NewVecDense(len(pts), nil)
	for i, p := range pts {
		x := p.Moisture - mean
		a.SetRow(i, []float64{1, x, x * x})
		b.SetVec(i, p.DryDensity)
	}
	var qr mat.QR
	qr.Factorize(a)
	var x mat.VecDense
	if err := qr.SolveVecTo(&x, false, b); err != nil {
		return [3]float64{}, fmt.Errorf("soil: fit curve: %w", valid.Missing("points", "cannot be fitted: "+err.Error()))
	}
	// Expand c0 + c1 (w - m) + c2 (w - m)^2 back to powers of w.
	k0, k1, k2 := x.AtVec(0), x.AtVec(1), x.AtVec(2)
	return [3]float64{k0 - k1*mean + k2*mean*mean, k1 - 2*k2*mean, k2}, nil
}

// At returns the fitted dry density at moisture w.
func (f Fit) At(w float64) float64 {
	return f.Coefficients[0] + f.Coefficients[1]*w + f.Coefficients[2]*w*w
}

func cmpFloat(a, b float64) int {
	switch {
	case a < b:
		return -1
	case a > b:
		return 1
	}
	return 0
}

// Oversize describes the coarse fraction removed before a laboratory test
// (ASTM D4718, AASHTO T 224).
type Oversize struct {
	Percent  float64 // percent of the total dry mass retained on the method's sieve
	BulkGs   float64 // bulk specific gravity of the oversize particles
	Moisture float64 // moisture of the oversize, percent (often about 1-2 %)
}

func (o Oversize) check() error {
	return valid.First(valid.Range("oversize_percent", o.Percent, 0, 100, " %"),
		checkGs("oversize_gs", o.BulkGs), checkMoisture("oversize_moisture", o.Moisture))
}

// CorrectForOversize returns the maximum dry density and optimum moisture of
// the total material from those of the finer fraction (ASTM D4718, AASHTO
// T 224): D = 100 D_f k / (D_f P_c + k P_f), k = Gs_bulk rho_w, and
// w = (w_f P_f + w_c P_c) / 100.
func CorrectForOversize(fineMDD, fineOMC float64, o Oversize, water float64) (mdd, omc float64, err error) {
	if err := valid.First(valid.Positive("max_dry_density", fineMDD), checkMoisture("optimum_moisture", fineOMC),
		o.check(), valid.Positive("water_density", water)); err != nil {
		return 0, 0, fmt.Errorf("soil: oversize correction: %w", err)
	}
	if o.Percent >= 100 {
		return 0, 0, fmt.Errorf("soil: oversize correction: %w", valid.Fail("oversize_percent", o.Percent, "must be less than 100 %"))
	}
	k := o.BulkGs * water
	pf, pc := 100-o.Percent, o.Percent
	mdd = 100 * fineMDD * k / (fineMDD*pc + k*pf)
	omc = (fineOMC*pf + o.Moisture*pc) / 100
	return mdd, omc, nil
}

// FineFraction is the inverse of CorrectForOversize for density: the dry
// density of the finer fraction of total material of dry density total,
// D_f = D k P_f / (100 k - D P_c). Use it to compare a field density of the
// whole material with an uncorrected laboratory maximum.
func FineFraction(total float64, o Oversize, water float64) (float64, error) {
	if err := valid.First(valid.Positive("dry_density", total), o.check(), valid.Positive("water_density", water)); err != nil {
		return 0, fmt.Errorf("soil: fine fraction: %w", err)
	}
	k := o.BulkGs * water
	den := 100*k - total*o.Percent
	if den <= 0 || o.Percent >= 100 {
		return 0, fmt.Errorf("soil: fine fraction: %w", valid.Fail("oversize_percent", o.Percent, "leaves no finer fraction at this density"))
	}
	return total * k * (100 - o.Percent) / den, nil
}

// OversizeCorrectionLimit is the largest oversize percent for which the
// correction of ASTM D4718 / AASHTO T 224 is used: 40 % retained on the
// 4.75 mm sieve, 30 % on the 19.0 mm sieve (from memory).
func OversizeCorrectionLimit(sieve string) float64 {
	if strings.HasPrefix(sieve, "3/4") {
		return 30
	}
	return 40
}

// InScope reports whether an oversize percent lies within both the method's
// scope and the correction's limit.
func (p Procedure) InScope(oversizePercent float64) (bool, error) {
	sc, err := p.Scope()
	if err != nil {
		return false, err
	}
	return oversizePercent <= sc.MaxOversize && oversizePercent <= OversizeCorrectionLimit(sc.Sieve), nil
}
