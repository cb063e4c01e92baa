package qc

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mathext"
	"gonum.org/v1/gonum/stat"

	"tamp/internal/valid"
)

// MinLotSize is the fewest results percent within limits is estimated from.
const MinLotSize = 3

// Lot is the statistical acceptance of a lot of test results.
type Lot struct {
	N      int
	Mean   float64
	StdDev float64 // sample standard deviation (n - 1)
	// QualityLower is (mean - lower) / s and QualityUpper (upper - mean) / s;
	// each is NaN when its limit was not given.
	QualityLower, QualityUpper float64
	// PWLLower and PWLUpper are the percent within each limit (100 where a
	// limit was not given); PWL is the percent within both:
	// PWL = PWL_L + PWL_U - 100.
	PWLLower, PWLUpper, PWL float64
}

// PercentWithinLimits estimates the percent of the lot within the limits
// from a sample, with the beta-distribution estimator that reproduces the
// published PWL tables (FHWA Technical Advisory T 5080.12): for each limit
// PWL = 100 I_x(b, b), b = (n - 2) / 2, x = 1/2 + Q sqrt(n) / (2 (n - 1))
// clamped to [0, 1], I the regularized incomplete beta function. Either limit
// may be nil, not both. All results equal give s = 0: each limit's PWL is
// then 100 when the mean lies inside it, 0 outside, 50 on it.
func PercentWithinLimits(values []float64, lower, upper *float64) (Lot, error) {
	if len(values) < MinLotSize {
		return Lot{}, fmt.Errorf("qc: percent within limits: %w", valid.Fail("values", float64(len(values)), "a lot needs at least 3 results"))
	}
	if lower == nil && upper == nil {
		return Lot{}, fmt.Errorf("qc: percent within limits: %w", valid.Missing("lower", "a lower or an upper limit is required"))
	}
	for i, v := range values {
		if math.IsNaN(v) || math.IsInf(v, 0) { // the field is named only when it is at fault
			return Lot{}, fmt.Errorf("qc: percent within limits: %w", valid.Finite(fmt.Sprintf("values[%d]", i), v))
		}
	}
	for _, l := range []struct {
		name string
		v    *float64
	}{{"lower", lower}, {"upper", upper}} {
		if l.v != nil {
			if err := valid.Finite(l.name, *l.v); err != nil {
				return Lot{}, fmt.Errorf("qc: percent within limits: %w", err)
			}
		}
	}
	if lower != nil && upper != nil && *lower >= *upper {
		return Lot{}, fmt.Errorf("qc: percent within limits: %w", valid.Fail("upper", *upper, "must be greater than lower"))
	}
	mean, sd := stat.MeanStdDev(values, nil)
	if math.IsNaN(sd) || math.IsInf(sd, 0) || math.IsInf(mean, 0) {
		return Lot{}, fmt.Errorf("qc: percent within limits: %w", valid.Missing("values", "are too large to average"))
	}
	lot := Lot{N: len(values), Mean: mean, StdDev: sd, QualityLower: math.NaN(), QualityUpper: math.NaN(), PWLLower: 100, PWLUpper: 100}
	if lower != nil {
		lot.QualityLower = quality(mean-*lower, sd)
		lot.PWLLower = PWLFromQuality(lot.N, lot.QualityLower)
	}
	if upper != nil {
		lot.QualityUpper = quality(*upper-mean, sd)
		lot.PWLUpper = PWLFromQuality(lot.N, lot.QualityUpper)
	}
	lot.PWL = max(0, lot.PWLLower+lot.PWLUpper-100)
	return lot, nil
}

func quality(margin, sd float64) float64 {
	if sd == 0 {
		switch {
		case margin > 0:
			return math.Inf(1)
		case margin < 0:
			return math.Inf(-1)
		}
		return 0
	}
	return margin / sd
}

// maxSeriesLot is the largest lot whose percent within limits
// PWLFromQuality sums in closed form (pwlSeries); a larger lot, whose sum
// would be long, goes to gonum's incomplete beta function.
const maxSeriesLot = 400

// PWLFromQuality returns the percent within one limit for a quality index q
// and sample size n (n >= 3). Up to maxSeriesLot results it is summed in
// closed form, about four times faster than the incomplete beta function
// and within 1e-10 percent of it (TestPWLSeriesAsIncompleteBeta).
func PWLFromQuality(n int, q float64) float64 {
	if n < MinLotSize || math.IsNaN(q) {
		return math.NaN()
	}
	if n <= maxSeriesLot {
		return pwlSeries(n, q)
	}
	return pwlBeta(n, q)
}

// pwlBeta is 100 I_x(b, b) through gonum's regularized incomplete beta
// function, for any n >= 3.
func pwlBeta(n int, q float64) float64 {
	b := float64(n-2) / 2
	x := 0.5 + q*math.Sqrt(float64(n))/(2*float64(n-1))
	x = min(1, max(0, x))
	return 100 * mathext.RegIncBeta(b, b, x)
}

// pwlSeries is PWLFromQuality for a lot of n results (3 <= n <=
// maxSeriesLot), 100 I_x(b, b) with b = (n - 2) / 2 and x = 1/2 + Q sqrt(n)
// / (2 (n - 1)) clamped to [0, 1], summed in closed form. I_x(m/2, m/2) is
// the distribution function of Student's t with m = n - 2 degrees of
// freedom at the t whose angle θ = atan(t / sqrt(m)) has sin θ = 2x - 1 and
// cos² θ = 4x(1 - x), and that function is a finite sum (Abramowitz and
// Stegun 26.7.3 and 26.7.4): for m even,
//
//	I = 1/2 + (sin θ / 2) Σ_{k=0}^{m/2-1} c_k cos^{2k} θ,  c_0 = 1, c_k = c_{k-1} (2k - 1) / (2k);
//
// for m odd,
//
//	I = 1/2 + (θ + sin θ cos θ Σ_{k=0}^{(m-3)/2} d_k cos^{2k} θ) / π,  d_0 = 1, d_k = d_{k-1} 2k / (2k + 1).
//
// Every term of a sum has one sign, so that no precision is lost summing.
func pwlSeries(n int, q float64) float64 {
	if math.IsNaN(q) {
		return math.NaN()
	}
	x := 0.5 + q*math.Sqrt(float64(n))/(2*float64(n-1))
	switch {
	case x <= 0:
		return 0
	case x >= 1:
		return 100
	}
	m := n - 2
	sin, cos2 := 2*x-1, 4*x*(1-x)
	if m%2 == 0 {
		return 100 * (0.5 + sin*horner(seriesEven[:m/2], cos2)/2)
	}
	return 100 * (0.5 + (math.Asin(sin)+sin*math.Sqrt(cos2)*horner(seriesOdd[:(m-1)/2], cos2))/math.Pi)
}

// horner is Σ c[k] y^k.
func horner(c []float64, y float64) float64 {
	var sum float64
	for k := len(c) - 1; k >= 0; k-- {
		sum = sum*y + c[k]
	}
	return sum
}

// seriesEven and seriesOdd are the coefficients c_k and d_k of pwlSeries'
// sums, the same for every lot size.
var seriesEven, seriesOdd = func() (c, d [maxSeriesLot / 2]float64) {
	c[0], d[0] = 1, 1
	for k := 1; k < len(c); k++ {
		c[k] = c[k-1] * float64(2*k-1) / float64(2*k)
		d[k] = d[k-1] * float64(2*k) / float64(2*k+1)
	}
	return c, d
}()
