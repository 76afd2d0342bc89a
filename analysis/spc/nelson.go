package spc

import (
	"fmt"
	"math"
)

// RuleHit is one Nelson run-rule match.
type RuleHit struct {
	Rule   int   // 1..8
	Index  int   // 0-based index of the point that completes the pattern
	Points []int // 0-based indices of the points that form the pattern
}

// nelsonRules describes the eight tests (Nelson, "The Shewhart control
// chart — tests for special causes", J. Quality Technology 16(4), 1984).
// Zone boundaries are at centre ± 1, 2, 3 sigma; "beyond" is strict.
var nelsonRules = [...]string{
	1: "one point beyond 3 sigma",
	2: "nine points in a row on the same side of the centre line",
	3: "six points in a row steadily increasing or decreasing",
	4: "fourteen points in a row alternating up and down",
	5: "two of three points in a row beyond 2 sigma on the same side",
	6: "four of five points in a row beyond 1 sigma on the same side",
	7: "fifteen points in a row within 1 sigma of the centre line",
	8: "eight points in a row beyond 1 sigma, on either side",
}

// RuleDescription returns a one-line description of Nelson rule r (1..8),
// or "" for another number.
func RuleDescription(r int) string {
	if r < 1 || r > 8 {
		return ""
	}
	return nelsonRules[r]
}

// Nelson applies the Nelson run rules to x with the given centre line and
// sigma (unit of the values) and returns every match, ordered by Index and
// then Rule. No rules means all eight. With z_i = (x_i − centre)/sigma:
//
//	1  |z_i| > 3
//	2  z > 0 for points i−8..i, or z < 0 for all of them (z = 0 breaks the run)
//	3  x_(i−5) < … < x_i, or x_(i−5) > … > x_i (a tie breaks the run)
//	4  the 13 successive differences ending at i alternate in sign (a zero breaks it)
//	5  z_i > 2 and at least 2 of z_(i−2..i) > 2; or the same below −2
//	6  z_i > 1 and at least 4 of z_(i−4..i) > 1; or the same below −1
//	7  |z| ≤ 1 for points i−14..i
//	8  |z| > 1 for points i−7..i (either side)
//
// (Nelson, J. Quality Technology 16(4), 1984; Montgomery, Introduction to
// Statistical Quality Control, §5.3.6). A rule fires at the point that
// completes its pattern and not one point earlier; a run longer than its
// pattern fires again at every further point. Rules 5 and 6 fire only when the
// newest point is one of the points beyond the zone (otherwise the pattern
// was already complete, or not at all) and count the points available at the
// start of the series, so two points beyond 2σ at indices 0 and 1 fire at 1.
func Nelson(x []float64, centre, sigma float64, rules ...int) ([]RuleHit, error) {
	if err := checkFinite("value", x); err != nil {
		return nil, err
	}
	if !isFinite(centre) {
		return nil, fmt.Errorf("spc: centre %v must be a finite number", centre)
	}
	if err := checkSigma(sigma); err != nil {
		return nil, err
	}
	var on [9]bool
	if len(rules) == 0 {
		rules = []int{1, 2, 3, 4, 5, 6, 7, 8}
	}
	for _, r := range rules {
		if r < 1 || r > 8 {
			return nil, fmt.Errorf("spc: Nelson rule %d does not exist; rules are numbered 1 to 8", r)
		}
		on[r] = true
	}

	var hits []RuleHit
	window := func(rule, i, m int) {
		pts := make([]int, m)
		for j := range pts {
			pts[j] = i - m + 1 + j
		}
		hits = append(hits, RuleHit{Rule: rule, Index: i, Points: pts})
	}
	// zoneHit records rules 5 and 6: the points of x[i−m+1..i] beyond
	// `zone` sigma on the side of x[i], when there are at least need of them.
	zoneHit := func(rule, i, m, need int, zone, side float64) {
		var pts []int
		for j := max(0, i-m+1); j <= i; j++ {
			if (x[j]-centre)/sigma*side > zone {
				pts = append(pts, j)
			}
		}
		if len(pts) >= need {
			hits = append(hits, RuleHit{Rule: rule, Index: i, Points: pts})
		}
	}

	var above, below, inc, dec, alt, within, outside int
	prevDiff := 0.0
	for i, v := range x {
		z := (v - centre) / sigma
		if on[1] && math.Abs(z) > 3 {
			hits = append(hits, RuleHit{Rule: 1, Index: i, Points: []int{i}})
		}

		above, below = countIf(z > 0, above), countIf(z < 0, below)
		if on[2] && (above >= 9 || below >= 9) {
			window(2, i, 9)
		}

		if i > 0 {
			d := v - x[i-1]
			inc, dec = countIf(d > 0, inc), countIf(d < 0, dec)
			switch {
			case d == 0:
				alt = 0
			case prevDiff != 0 && (d > 0) != (prevDiff > 0):
				alt++
			default:
				alt = 1
			}
			prevDiff = d
		}
		if on[3] && (inc >= 5 || dec >= 5) {
			window(3, i, 6)
		}
		if on[4] && alt >= 13 {
			window(4, i, 14)
		}

		if on[5] && math.Abs(z) > 2 {
			zoneHit(5, i, 3, 2, 2, math.Copysign(1, z))
		}
		if on[6] && math.Abs(z) > 1 {
			zoneHit(6, i, 5, 4, 1, math.Copysign(1, z))
		}

		within, outside = countIf(math.Abs(z) <= 1, within), countIf(math.Abs(z) > 1, outside)
		if on[7] && within >= 15 {
			window(7, i, 15)
		}
		if on[8] && outside >= 8 {
			window(8, i, 8)
		}
	}
	return hits, nil
}

func countIf(ok bool, n int) int {
	if ok {
		return n + 1
	}
	return 0
}
