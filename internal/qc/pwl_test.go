package qc

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestPWLSeriesAsIncompleteBeta holds the closed-form sum to gonum's
// regularized incomplete beta function (the published estimator's form) on
// every lot size the sum serves and quality indexes from far below a limit
// to far above it, the clamped ends included.
func TestPWLSeriesAsIncompleteBeta(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 8))
	var worst float64
	for n := MinLotSize; n <= maxSeriesLot; n++ {
		qs := []float64{0, math.Inf(1), math.Inf(-1), 1e-300, -1e-300}
		// The quality indexes at which x reaches 0 and 1, and beside them.
		edge := 2 * float64(n-1) / (2 * math.Sqrt(float64(n)))
		qs = append(qs, edge, -edge, math.Nextafter(edge, 0), math.Nextafter(-edge, 0))
		for q := -6.0; q <= 6; q += 0.01 {
			qs = append(qs, q)
		}
		// Beyond, to where x clamps (Q up to (n - 1) / sqrt(n), about 20 at
		// the largest lot the sum serves).
		for i := -600; i <= 600; i++ {
			qs = append(qs, 1.05*edge*float64(i)/600)
		}
		for range 200 {
			qs = append(qs, 12*rng.Float64()-6)
		}
		for _, q := range qs {
			got, want := pwlSeries(n, q), pwlBeta(n, q)
			d := math.Abs(got - want)
			worst = max(worst, d)
			if !(d <= 1e-10) {
				t.Fatalf("pwlSeries(%d, %v) = %v, want %v as the incomplete beta function gives (off by %g)", n, q, got, want, d)
			}
		}
	}
	t.Logf("largest difference %g percent", worst)
	// Past the sum's largest lot, the incomplete beta function answers.
	if got, want := PWLFromQuality(maxSeriesLot+1, 1.2), pwlBeta(maxSeriesLot+1, 1.2); got != want {
		t.Fatalf("PWLFromQuality(%d, 1.2) = %v, want the incomplete beta's %v", maxSeriesLot+1, got, want)
	}
}

// BenchmarkPWL compares the closed-form sum with the incomplete beta
// function on a lot of 50.
func BenchmarkPWL(b *testing.B) {
	for _, c := range []struct {
		name string
		f    func(int, float64) float64
	}{{"beta", pwlBeta}, {"series", pwlSeries}} {
		b.Run(c.name, func(b *testing.B) {
			for b.Loop() {
				c.f(50, 1.3)
			}
		})
	}
}
