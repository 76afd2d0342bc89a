package spc

import (
	"errors"
	"math"
	"testing"
)

// The NIST/SEMATECH e-Handbook §6.3.2.2 individuals data (secondary copy): x̄ = 50.81, MR̄ = 1.8778, so
// σ̂ = MR̄/1.128 = 1.6647 (computed from the published MR̄ and table d2).
// Later points must not influence a baseline of the first 10.
func TestEstimateBaseline(t *testing.T) {
	x := []float64{49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1}
	longer := append(append([]float64(nil), x...), 80, 20, 95)
	for name, c := range map[string]struct {
		x []float64
		n int
	}{"first 10 of 13": {longer, 10}, "default n, 10 values": {x, 0}, "n beyond length": {x, 50}} {
		centre, sigma, err := EstimateBaseline(c.x, c.n)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		near(t, name+" centre", centre, 50.81, 0.005)
		near(t, name+" sigma", sigma, 1.8778/1.128, 0.00005/1.128)
	}
	// With the default of 20 points the 11th and later values count.
	c13, _, _ := EstimateBaseline(longer, 0)
	near(t, "centre of 13", c13, mean(longer), 1e-12)
}

func TestEstimateBaselineErrors(t *testing.T) {
	if _, _, err := EstimateBaseline([]float64{1, 2, 3, 4}, 20); err == nil {
		t.Error("4 points: no error")
	}
	if _, _, err := EstimateBaseline([]float64{1, 2, 3, 4, 5, 6}, 4); err == nil {
		t.Error("n = 4: no error")
	}
	if _, _, err := EstimateBaseline([]float64{3, 3, 3, 3, 3}, 0); !errors.Is(err, ErrNoSpread) {
		t.Errorf("flat: %v, want ErrNoSpread", err)
	}
	if _, _, err := EstimateBaseline([]float64{1, 2, math.Inf(1), 4, 5}, 0); err == nil {
		t.Error("Inf: no error")
	}
}
