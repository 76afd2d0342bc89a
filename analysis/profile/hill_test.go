package profile

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/diff/fd"
)

// TestHillInflectionVector: test vector derived from the zero of the second
// derivative at x_i, A = 0, B = 100,
// C = 50 mm, D = 20 → x_i = 49.7504 mm, f(x_i) = 47.5.
func TestHillInflectionVector(t *testing.T) {
	x, f := Hill{A: 0, B: 100, C: 50, D: 20}.Inflection()
	if !near(x, 49.7504, 5e-5) || !near(f, 47.5, 1e-12) {
		t.Fatalf("inflection (%.6f, %.6f), want (49.7504, 47.5)", x, f)
	}
}

// TestHillInflectionIsZeroOfSecondDerivative re-derives the inflection
// formula numerically: gonum's central second-difference f” vanishes at x_i
// and changes sign there, for random parameters.
func TestHillInflectionIsZeroOfSecondDerivative(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	for range 50 {
		h := Hill{A: 100 * rng.Float64(), B: 100 + 50*rng.Float64(), C: 10 + 100*rng.Float64(), D: 5 + 60*rng.Float64()}
		if rng.IntN(2) == 0 {
			h.A, h.B = h.B, h.A
		}
		x, f := h.Inflection()
		if !near(h.At(x), f, 1e-9*math.Abs(h.B-h.A)) {
			t.Fatalf("%+v: At(x_i) = %g, Inflection gives %g", h, h.At(x), f)
		}
		step := 1e-3 * h.C
		second := func(x float64) float64 {
			return fd.Derivative(h.At, x, &fd.Settings{Formula: fd.Central2nd, Step: step})
		}
		d := 0.02 * h.C / h.D // a small move compared with the edge width C/D
		scale := math.Abs(second(x - d))
		if math.Abs(second(x)) > 1e-3*scale || second(x-d)*second(x+d) >= 0 {
			t.Fatalf("%+v: f''(x_i) = %g, f''(x_i ∓ d) = %g, %g", h, second(x), second(x-d), second(x+d))
		}
	}
}

// TestHillMidpoint: f(C) = (A + B)/2, since (C/C)^D = 1 (derived).
func TestHillMidpoint(t *testing.T) {
	h := Hill{A: 3, B: 97, C: 42, D: 30}
	if got := h.At(h.C); !near(got, 50, 1e-12) {
		t.Fatalf("f(C) = %g, want 50", got)
	}
	if got := h.At(0); got != h.A {
		t.Fatalf("f(0) = %g, want A", got)
	}
}

// TestHillGradient compares the analytic gradient of the sum of squares with
// gonum's finite-difference gradient.
func TestHillGradient(t *testing.T) {
	h := Hill{A: 98, B: 4, C: 50, D: 35}
	xs := grid(40, 60, 0.5)
	ys := make([]float64, len(xs))
	rng := rand.New(rand.NewPCG(9, 10))
	for i, x := range xs {
		ys[i] = h.At(x) + rng.NormFloat64()
	}
	p := []float64{95, 6, math.Log(49), math.Log(30)}
	got := make([]float64, 4)
	hillSSE(got, xs, ys, p)
	want := fd.Gradient(nil, func(t []float64) float64 { return hillSSE(nil, xs, ys, t) }, p, &fd.Settings{Formula: fd.Central})
	for i := range got {
		if !near(got[i], want[i], 1e-5*(1+math.Abs(want[i]))) {
			t.Errorf("∂S/∂t[%d] = %g, finite difference %g", i, got[i], want[i])
		}
	}
}

// TestFitHillRecovers: exact Hill data give back the parameters; with noise
// the inflection stays within 0.1 mm.
func TestFitHillRecovers(t *testing.T) {
	truth := Hill{A: 100, B: 2, C: 50, D: 40}
	xs := grid(42, 58, 0.5)
	ys := make([]float64, len(xs))
	for i, x := range xs {
		ys[i] = truth.At(x)
	}
	fit, err := FitHill(xs, ys, Hill{A: 95, B: 5, C: 49, D: 20})
	if err != nil {
		t.Fatal(err)
	}
	if !near(fit.A, truth.A, 1e-4) || !near(fit.B, truth.B, 1e-4) || !near(fit.C, truth.C, 1e-5) || !near(fit.D, truth.D, 1e-3) || fit.Points != len(xs) || fit.RMS > 1e-5 {
		t.Fatalf("fit %+v, want %+v", fit, truth)
	}
	wantX, _ := truth.Inflection()
	rng := rand.New(rand.NewPCG(11, 12))
	for seed := range 20 {
		noisy := make([]float64, len(ys))
		for i := range ys {
			noisy[i] = ys[i] + 0.5*rng.NormFloat64()
		}
		fit, err := FitHill(xs, noisy, Hill{A: 95, B: 5, C: 49, D: 20})
		if err != nil {
			t.Fatal(err)
		}
		if x, _ := fit.Inflection(); !near(x, wantX, 0.1) {
			t.Errorf("seed %d: inflection %.4f, want %.4f ± 0.1", seed, x, wantX)
		}
	}
}

func TestFitHillErrors(t *testing.T) {
	xs := []float64{1, 2, 3, 4, 5, 6}
	ys := []float64{9, 8, 7, 3, 2, 1}
	cases := []struct {
		name   string
		x, y   []float64
		guess  Hill
		errSub string
	}{
		{"too few", xs[:4], ys[:4], Hill{9, 1, 3.5, 5}, "need at least 5"},
		{"zero x", []float64{0, 2, 3, 4, 5, 6}, ys, Hill{9, 1, 3.5, 5}, "positive"},
		{"NaN y", xs, []float64{9, math.NaN(), 7, 3, 2, 1}, Hill{9, 1, 3.5, 5}, "finite"},
		{"D ≤ 1", xs, ys, Hill{9, 1, 3.5, 1}, "D > 1"},
	}
	for _, c := range cases {
		_, err := FitHill(c.x, c.y, c.guess)
		if !errors.Is(err, ErrFit) || !strings.Contains(err.Error(), c.errSub) {
			t.Errorf("%s: got %v, want ErrFit mentioning %q", c.name, err, c.errSub)
		}
	}
}
