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

// PWLFromQuality returns the percent within one limit for a quality index q
// and sample size n (n >= 3).
func PWLFromQuality(n int, q float64) float64 {
	if n < MinLotSize || math.IsNaN(q) {
		return math.NaN()
	}
	b := float64(n-2) / 2
	x := 0.5 + q*math.Sqrt(float64(n))/(2*float64(n-1))
	x = min(1, max(0, x))
	return 100 * mathext.RegIncBeta(b, b, x)
}
