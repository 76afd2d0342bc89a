package spc

import (
	"fmt"
	"math"
)

// checkFinite returns an error naming the first NaN or infinite value of x.
// what names the series in the message ("value", "y").
func checkFinite(what string, x []float64) error {
	for i, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("spc: %s %d (1-based) is %v; remove it or replace it with a measured value", what, i+1, v)
		}
	}
	return nil
}

// checkSigma rejects a non-positive or non-finite sigma.
func checkSigma(sigma float64) error {
	if !(sigma > 0) || math.IsInf(sigma, 0) {
		return fmt.Errorf("spc: sigma %v must be a positive finite number (same unit as the values)", sigma)
	}
	return nil
}

func isFinite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// mean returns the arithmetic mean of x (x non-empty).
func mean(x []float64) float64 {
	var s float64
	for _, v := range x {
		s += v
	}
	return s / float64(len(x))
}

// meanMovingRange returns MR̄ = sum_{i=2..n} |x_i − x_(i−1)| / (n − 1)
// (len(x) ≥ 2).
func meanMovingRange(x []float64) float64 {
	var s float64
	for i := 1; i < len(x); i++ {
		s += math.Abs(x[i] - x[i-1])
	}
	return s / float64(len(x)-1)
}
