package spc

import (
	"math"
	"math/rand/v2"
	"testing"
)

// runLengths simulates m in-control N(0, 1) series, each until its first
// signal, and returns the mean run length and its standard error
// (sample sd/√m). next resets a chart and returns its step function.
func runLengths(m int, seed uint64, next func() func(float64) bool) (mean, se float64) {
	rng := rand.New(rand.NewPCG(seed, seed^0x9e3779b97f4a7c15))
	var sum, sumSq float64
	for range m {
		step := next()
		n := 1
		for ; n < 1_000_000 && !step(rng.NormFloat64()); n++ {
		}
		sum += float64(n)
		sumSq += float64(n) * float64(n)
	}
	mean = sum / float64(m)
	sd := math.Sqrt((sumSq - float64(m)*mean*mean) / float64(m-1))
	return mean, sd / math.Sqrt(float64(m))
}

// In-control ARL of the default designs, estimated from simulated N(0, 1)
// series with a fixed seed.
//
// The run length is close to geometric, so its sd is close to its mean and
// the estimate's standard error is about ARL/√m (≈ 2 for ARL 500 and
// m = 60000, 0.4 %); the test uses the sd of the simulated run lengths. The assertion allows 4 standard errors (a false failure
// has probability < 1e-4 for a new seed) plus 1 % for the rounding of the
// published design values (L = 2.814 to three decimals moves the ARL by
// about 0.5 %; the CUSUM ARL 465 is printed to three figures).
//
// Published values (from memory): EWMA λ = 0.1, L = 2.814 with
// steady-state limits, ARL 500 (Lucas & Saccucci, Technometrics 32(1),
// 1990); two-sided CUSUM k = 0.5, h = 5, ARL 465 (Montgomery, Introduction to
// Statistical Quality Control, Table 9.3).
func TestInControlARL(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	const m = 60000
	check := func(name string, published, mean, se float64) {
		t.Helper()
		tol := 4*se + 0.01*published
		t.Logf("%s: simulated ARL %.1f ± %.1f (published %.0f, tolerance %.1f)", name, mean, se, published, tol)
		if math.Abs(mean-published) > tol {
			t.Errorf("%s: simulated in-control ARL %.1f, published %.0f (tolerance %.1f)", name, mean, published, tol)
		}
	}

	mean, se := runLengths(m, 1, func() func(float64) bool {
		c, err := NewEWMAChart(EWMAOptions{Target: 0, Sigma: 1, Limits: LimitsSteady})
		if err != nil {
			t.Fatal(err)
		}
		return func(x float64) bool { return c.Next(x).Signal }
	})
	check("EWMA λ=0.1 L=2.814 steady", 500, mean, se)

	// Time-varying limits are narrower at every point, so on the same
	// random series the chart signals no later: its ARL (same seed) cannot
	// exceed the steady-state one.
	exact, _ := runLengths(m, 1, func() func(float64) bool {
		c, err := NewEWMAChart(EWMAOptions{Target: 0, Sigma: 1, Limits: LimitsExact})
		if err != nil {
			t.Fatal(err)
		}
		return func(x float64) bool { return c.Next(x).Signal }
	})
	t.Logf("EWMA λ=0.1 L=2.814 time-varying limits: simulated ARL %.1f", exact)
	if exact > mean {
		t.Errorf("time-varying limits ARL %.1f exceeds steady-state ARL %.1f on the same series", exact, mean)
	}

	mean, se = runLengths(m, 2, func() func(float64) bool {
		c, err := NewCUSUMChart(CUSUMOptions{Target: 0, Sigma: 1})
		if err != nil {
			t.Fatal(err)
		}
		return func(x float64) bool { return c.Next(x).Signal() }
	})
	check("CUSUM k=0.5 h=5", 465, mean, se)
}

// Out-of-control ARL at a 1σ shift for the default CUSUM: 10.4 (Montgomery
// Table 9.3, from memory). The run length is not geometric here, so only the
// standard error computed from the simulated run lengths is used: the
// tolerance is 4 of them plus 1 % for the printed rounding.
func TestCUSUMShiftARL(t *testing.T) {
	const m = 20000
	mean, se := runLengths(m, 3, func() func(float64) bool {
		c, err := NewCUSUMChart(CUSUMOptions{Target: 0, Sigma: 1})
		if err != nil {
			t.Fatal(err)
		}
		return func(x float64) bool { return c.Next(x + 1).Signal() }
	})
	tol := 4*se + 0.01*10.4
	t.Logf("CUSUM 1σ shift: simulated ARL %.2f ± %.2f (published 10.4, tolerance %.2f)", mean, se, tol)
	if math.Abs(mean-10.4) > tol {
		t.Errorf("CUSUM ARL at a 1σ shift %.2f, published 10.4 (tolerance %.2f)", mean, tol)
	}
}
