package spc

import (
	"math"
	"testing"
)

// montgomeryData is the series of Montgomery, Introduction to Statistical
// Quality Control, Examples 9.1 and 9.2 (μ0 = 10, σ = 1; a 1σ shift after
// sample 20). Data seen in two independent copies.
var montgomeryData = []float64{9.45, 7.99, 9.29, 11.66, 12.16, 10.18, 8.04, 11.46, 9.20, 10.34,
	9.03, 11.47, 10.51, 9.40, 10.08, 9.37, 10.62, 10.31, 8.52, 10.84,
	10.90, 9.33, 12.29, 11.50, 10.60, 11.08, 10.38, 11.62, 11.31, 10.52}

// NIST/SEMATECH e-Handbook of Statistical Methods §6.3.2.4 EWMA example
// (secondary copy):
// λ = 0.3, target 50, s = 2.0539, L = 3. Convention: steady-state limits.
// z is printed to 2 decimals and the limits to 4 (tolerance half a unit;
// LCL 47.4115 is NIST's rounding of 47.41156, hence 0.0001 there).
func TestEWMANIST(t *testing.T) {
	x := []float64{52.0, 47.0, 53.0, 49.3, 50.1, 47.0, 51.0, 50.1, 51.2, 50.5,
		49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1}
	wantZ := []float64{50.60, 49.52, 50.56, 50.18, 50.16, 49.21, 49.75, 49.85, 50.26, 50.33,
		50.11, 49.36, 49.52, 50.05, 49.38, 49.92, 50.73, 51.23, 51.94, 51.99}
	r, err := EWMA(x, EWMAOptions{Target: 50, Sigma: 2.0539, Lambda: 0.3, L: 3, Limits: LimitsSteady})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "steady UCL", r.SteadyUCL, 52.5884, 0.00005)
	near(t, "steady LCL", r.SteadyLCL, 47.4115, 0.0001)
	for i, w := range wantZ {
		near(t, "z", r.Z[i], w, 0.005+1e-9)
		if r.UCL[i] != r.SteadyUCL || r.LCL[i] != r.SteadyLCL {
			t.Errorf("point %d: steady limits vary: %v %v", i, r.UCL[i], r.LCL[i])
		}
	}
	if r.FirstSignal != -1 {
		t.Errorf("first signal %d; NIST reports no signal", r.FirstSignal)
	}
}

// Montgomery Example 9.2 (seen in a third-party manual citing it):
// λ = 0.1, L = 2.7, μ0 = 10, σ = 1: z1 = 9.945, z2 = 9.7495, steady limits
// 10.6194 / 9.3806. Recomputed: the first signal with time-varying limits is
// at sample 29; the test recomputes the chart from the published formulas
// (z_i = λx_i + (1 − λ)z_(i−1), half-width L·σ·sqrt(λ/(2 − λ)·(1 − (1 − λ)^(2i))))
// in a plain loop and checks that EWMA agrees and that the signal is at 29.
func TestEWMAMontgomery(t *testing.T) {
	const lambda, L = 0.1, 2.7
	r, err := EWMA(montgomeryData, EWMAOptions{Target: 10, Sigma: 1, Lambda: lambda, L: L, Limits: LimitsExact})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "z1", r.Z[0], 9.945, 1e-12)
	near(t, "z2", r.Z[1], 9.7495, 1e-12)
	near(t, "steady UCL", r.SteadyUCL, 10.6194, 0.00005)
	near(t, "steady LCL", r.SteadyLCL, 9.3806, 0.00005)

	// Independent recomputation with math.Pow (EWMA keeps a running product).
	z, first := 10.0, -1
	for i, x := range montgomeryData {
		z = lambda*x + (1-lambda)*z
		half := L * math.Sqrt(lambda/(2-lambda)*(1-math.Pow(1-lambda, 2*float64(i+1))))
		near(t, "z", r.Z[i], z, 1e-12)
		near(t, "UCL", r.UCL[i], 10+half, 1e-12)
		near(t, "LCL", r.LCL[i], 10-half, 1e-12)
		if first < 0 && math.Abs(z-10) > half {
			first = i
		}
	}
	if first != 28 || r.FirstSignal != 28 {
		t.Errorf("first signal: recomputed sample %d, EWMA sample %d; recomputed from Montgomery's data: 29", first+1, r.FirstSignal+1)
	}
	// The time-varying limits approach the steady ones from inside.
	if !(r.UCL[0] < r.UCL[29] && r.UCL[29] < r.SteadyUCL) {
		t.Errorf("time-varying UCL %v … %v not below steady %v", r.UCL[0], r.UCL[29], r.SteadyUCL)
	}
}

func TestEWMADefaults(t *testing.T) {
	r, err := EWMA([]float64{0, 0}, EWMAOptions{Sigma: 1})
	if err != nil {
		t.Fatal(err)
	}
	if r.Lambda != 0.1 || r.L != 2.814 {
		t.Errorf("default design λ=%v L=%v, want 0.1, 2.814 (Lucas & Saccucci 1990 ARL-500 pair, from memory)", r.Lambda, r.L)
	}
	r, err = EWMA([]float64{0}, EWMAOptions{Sigma: 1, Lambda: 0.2})
	if err != nil || r.L != 2.962 {
		t.Errorf("λ = 0.2 default L %v (err %v), want 2.962", r.L, err)
	}
	// First exact half-width: L·σ·sqrt(λ/(2−λ)·(1−(1−λ)²)) = L·σ·λ.
	near(t, "first exact UCL", r.UCL[0], 2.962*0.2, 1e-12)
}

func TestEWMAErrors(t *testing.T) {
	cases := map[string]EWMAOptions{
		"zero sigma":         {Sigma: 0},
		"lambda > 1":         {Sigma: 1, Lambda: 1.5},
		"negative lambda":    {Sigma: 1, Lambda: -0.1},
		"untabulated lambda": {Sigma: 1, Lambda: 0.15},
		"negative L":         {Sigma: 1, L: -3},
		"limits":             {Sigma: 1, Limits: "wide"},
		"NaN target":         {Sigma: 1, Target: math.NaN()},
	}
	for name, o := range cases {
		if _, err := EWMA([]float64{1, 2}, o); err == nil {
			t.Errorf("%s: no error", name)
		}
	}
	if _, err := EWMA([]float64{1, math.Inf(1)}, EWMAOptions{Sigma: 1}); err == nil {
		t.Error("infinite value: no error")
	}
	if _, err := EWMA([]float64{1}, EWMAOptions{Sigma: 1, Lambda: 0.15, L: 2.8}); err != nil {
		t.Errorf("untabulated lambda with L: %v", err)
	}
}
