package spc

import "fmt"

// Baseline sizes: the default number of leading points, and the fewest that
// give a usable estimate.
const (
	DefaultBaselinePoints = 20
	MinBaselinePoints     = 5
)

// EstimateBaseline estimates the in-control centre and sigma from the first
// n values of x (n ≤ 0 means DefaultBaselinePoints; fewer values use them
// all):
//
//	centre = x̄ of x_1..x_m,  sigma = MR̄/d2,  d2 = 1.128,  m = min(n, len(x))
//
// (Montgomery, Introduction to Statistical Quality Control, §6.4: moving
// ranges estimate the short-term sigma without inflating it with drift).
// Twenty or more points are recommended (common practice); fewer than
// MinBaselinePoints is an error. Centre and sigma are in the unit of x.
func EstimateBaseline(x []float64, n int) (centre, sigma float64, err error) {
	if n <= 0 {
		n = DefaultBaselinePoints
	}
	m := min(n, len(x))
	if m < MinBaselinePoints {
		return 0, 0, fmt.Errorf("spc: a baseline needs at least %d values, got %d; measure more points before charting", MinBaselinePoints, m)
	}
	b := x[:m]
	if err := checkFinite("value", b); err != nil {
		return 0, 0, err
	}
	mrBar := meanMovingRange(b)
	if mrBar == 0 {
		return 0, 0, ErrNoSpread
	}
	return mean(b), mrBar / subgroupTable[0].RangeMean, nil
}
