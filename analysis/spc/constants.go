package spc

import (
	"fmt"
	"math"
)

// SubgroupConstants are the Shewhart control-chart constants for subgroups
// (or moving ranges) of size N, assuming normally distributed data:
//
//	d2 = E[R]/σ, d3 = sd[R]/σ           (R = range of N values)
//	A2 = 3/(d2·sqrt(N))                  x̄ limits x̿ ± A2·R̄
//	D3 = max(0, 1 − 3·d3/d2), D4 = 1 + 3·d3/d2   R limits D3·R̄, D4·R̄
//
// Table values as printed (three decimals) in ASTM STP 15D, Manual on
// Presentation of Data and Control Chart Analysis, and Montgomery,
// Introduction to Statistical Quality Control, Appendix VI (from memory;
// checked in the tests against numerical integration of the range
// distribution, Tippett 1925).
type SubgroupConstants struct {
	N          int
	A2, D3, D4 float64
	RangeMean  float64 // d2 = E[R]/σ
	RangeSD    float64 // d3 = sd[R]/σ
}

// subgroupTable holds n = 2..10, indexed by n-2.
var subgroupTable = [...]SubgroupConstants{
	{N: 2, A2: 1.880, RangeMean: 1.128, RangeSD: 0.853, D3: 0, D4: 3.267},
	{N: 3, A2: 1.023, RangeMean: 1.693, RangeSD: 0.888, D3: 0, D4: 2.574},
	{N: 4, A2: 0.729, RangeMean: 2.059, RangeSD: 0.880, D3: 0, D4: 2.282},
	{N: 5, A2: 0.577, RangeMean: 2.326, RangeSD: 0.864, D3: 0, D4: 2.114},
	{N: 6, A2: 0.483, RangeMean: 2.534, RangeSD: 0.848, D3: 0, D4: 2.004},
	{N: 7, A2: 0.419, RangeMean: 2.704, RangeSD: 0.833, D3: 0.076, D4: 1.924},
	{N: 8, A2: 0.373, RangeMean: 2.847, RangeSD: 0.820, D3: 0.136, D4: 1.864},
	{N: 9, A2: 0.337, RangeMean: 2.970, RangeSD: 0.808, D3: 0.184, D4: 1.816},
	{N: 10, A2: 0.308, RangeMean: 3.078, RangeSD: 0.797, D3: 0.223, D4: 1.777},
}

// Exact constants for a moving range of two (n = 2). The range of two
// independent N(0, σ²) values is |X1 − X2| with X1 − X2 ~ N(0, 2σ²), so
//
//	d2 = E|X1 − X2|/σ = 2/sqrt(π) ≈ 1.128379
//	d3 = sqrt(E[R²]/σ² − d2²) = sqrt(2 − 4/π) ≈ 0.852502
//	D4 = 1 + 3·d3/d2 ≈ 3.2665
//
// (half-normal moments; see Montgomery, Introduction to Statistical Quality
// Control, §6.4 on the moving range).
var (
	ExactD2MR = 2 / math.Sqrt(math.Pi)
	ExactD3MR = math.Sqrt(2 - 4/math.Pi)
	ExactD4MR = 1 + 3*ExactD3MR/ExactD2MR
)

// ConstantsChoice selects the I-MR chart constants.
type ConstantsChoice string

const (
	// ConstantsTable uses the rounded table values d2 = 1.128, D4 = 3.267
	// (NIST/SEMATECH e-Handbook §6.3.2.2, Montgomery Appendix VI).
	ConstantsTable ConstantsChoice = "table"
	// ConstantsExact uses the unrounded d2 = 2/sqrt(π) and
	// D4 = 1 + 3·sqrt(2 − 4/π)/d2.
	ConstantsExact ConstantsChoice = "exact"
)

// mrConstants returns d2 and D4 for moving ranges of two.
func mrConstants(c ConstantsChoice) (d2, d4 float64, err error) {
	switch c {
	case "", ConstantsTable:
		t := subgroupTable[0]
		return t.RangeMean, t.D4, nil
	case ConstantsExact:
		return ExactD2MR, ExactD4MR, nil
	}
	return 0, 0, fmt.Errorf("spc: constants %q unknown; use %q or %q", c, ConstantsTable, ConstantsExact)
}
