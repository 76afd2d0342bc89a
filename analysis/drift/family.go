package drift

import (
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// Family-wise false alarms. A machine carries hundreds of series (four jaw
// edges per geometry, 120 MLC leaf ends, penumbrae); charted one by one
// with in-control ARL ≈ 200–500 points each, some series of a steady
// machine signal at almost every evaluation. When Options.FamilySize m > 1
// the single-series designs are widened so that the whole family keeps
// roughly the false-alarm rate of one series (Bonferroni):
//
//   - individuals chart: L_m = Φ⁻¹(1 − 0.00135/m) instead of 3, the
//     two-sided tail 0.0027/m per point (Bonferroni; Φ⁻¹ from gonum);
//   - CUSUM: h chosen so that the two-sided in-control ARL is m times that
//     of (k, h = 5), by Siegmund's approximation for the one-sided ARL,
//     ARL₀ ≈ (e^{2kb} − 2kb − 1)/(2k²), b = h + 1.166 (Siegmund 1985, as
//     given by Montgomery, Introduction to Statistical Quality Control,
//     §9.1 — from memory);
//   - EWMA: no closed form for a widened design, so a family member's EWMA
//     is charted but does not raise Level 1; slow drifts still show in its
//     CUSUM and trend, and in the tolerance levels.
//
// Tolerance and action limits are never widened: Level 2 and 3 stay as set.

// ShewhartL is the individuals-chart width L (in σ) for a family of m
// series: 3 for one series, Φ⁻¹(1 − 0.00135/m) for more (Bonferroni).
func ShewhartL(m int) float64 {
	if m <= 1 {
		return 3
	}
	return distuv.UnitNormal.Quantile(1 - 0.00135/float64(m))
}

// siegmundARL is the one-sided in-control CUSUM run length (in σ units).
func siegmundARL(k, h float64) float64 {
	b := h + 1.166
	return (math.Exp(2*k*b) - 2*k*b - 1) / (2 * k * k)
}

// familyH widens the CUSUM decision interval h (σ units) for m series.
func familyH(k, h float64, m int) float64 {
	if m <= 1 {
		return h
	}
	want := siegmundARL(k, h) * float64(m)
	lo, hi := h, h+20
	for i := 0; i < 60; i++ {
		mid := (lo + hi) / 2
		if siegmundARL(k, mid) < want {
			lo = mid
		} else {
			hi = mid
		}
	}
	return (lo + hi) / 2
}
