package spc

import (
	"math/rand/v2"
	"testing"
	"time"
)

// series500 is a simulated daily QA series: 500 edge positions (mm) with a
// slow drift and noise, at one measurement a day.
func series500() ([]float64, []time.Time) {
	rng := rand.New(rand.NewPCG(1, 2))
	x := make([]float64, 500)
	t := make([]time.Time, 500)
	t0 := time.Date(2024, 1, 1, 7, 0, 0, 0, time.UTC)
	for i := range x {
		x[i] = 50 + 0.0005*float64(i) + 0.1*rng.NormFloat64()
		t[i] = t0.AddDate(0, 0, i)
	}
	return x, t
}

// BenchmarkEvaluateSeries500 is one full evaluation of a 500-point series:
// baseline, I-MR, EWMA, CUSUM, all Nelson rules and a Theil–Sen trend.
func BenchmarkEvaluateSeries500(b *testing.B) {
	x, times := series500()
	b.ReportAllocs()
	for b.Loop() {
		centre, sigma, err := EstimateBaseline(x, 20)
		if err != nil {
			b.Fatal(err)
		}
		if _, err := IMR(x, IMROptions{Centre: &centre, Sigma: &sigma}); err != nil {
			b.Fatal(err)
		}
		if _, err := EWMA(x, EWMAOptions{Target: centre, Sigma: sigma}); err != nil {
			b.Fatal(err)
		}
		if _, err := CUSUM(x, CUSUMOptions{Target: centre, Sigma: sigma}); err != nil {
			b.Fatal(err)
		}
		if _, err := Nelson(x, centre, sigma); err != nil {
			b.Fatal(err)
		}
		if _, err := TrendTimes(times, x, TrendOptions{}); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkSinglePass500 is the floor to compare against: one pass over the
// same 500 values computing the mean and mean moving range.
func BenchmarkSinglePass500(b *testing.B) {
	x, _ := series500()
	var sink float64
	for b.Loop() {
		sink += mean(x) + meanMovingRange(x)
	}
	_ = sink
}

// BenchmarkTrendTheilSen500 isolates the O(n²) Theil–Sen fit.
func BenchmarkTrendTheilSen500(b *testing.B) {
	x, times := series500()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := TrendTimes(times, x, TrendOptions{}); err != nil {
			b.Fatal(err)
		}
	}
}
