package spc

import (
	"errors"
	"fmt"
	"math"
)

// XbarRLimits are the limits of an x̄ and R chart pair for subgroups of N
// values. Values keep the unit of the data (mm, %).
type XbarRLimits struct {
	N          int     // subgroup size
	Centre     float64 // x̿, the grand mean
	Sigma      float64 // σ̂ = R̄/d2 (of single values)
	UCL, LCL   float64 // x̄ chart, x̿ ± 3·σ̂/sqrt(N)
	RCentre    float64 // R̄
	RUCL, RLCL float64 // R chart, D4·R̄ and D3·R̄
	Constants  SubgroupConstants
}

// XbarRFromStatistics computes x̄ and R chart limits from a grand mean x̿ and
// a mean range R̄ of subgroups of n values (2 ≤ n ≤ 10):
//
//	σ̂ = R̄/d2;  x̄ chart x̿ ± 3·σ̂/sqrt(n)  (= x̿ ± A2·R̄ with A2 unrounded)
//	R chart: centre R̄, UCL = D4·R̄, LCL = D3·R̄
//
// (Montgomery, Introduction to Statistical Quality Control, §6.2; ASTM STP
// 15D). The x̄ limits use 3/(d2·sqrt(n)) rather than the rounded A2 so that
// σ̂ and the limits agree to the printed digits.
func XbarRFromStatistics(grandMean, rBar float64, n int) (XbarRLimits, error) {
	c, err := Constants(n)
	if err != nil {
		return XbarRLimits{}, err
	}
	if !isFinite(grandMean) {
		return XbarRLimits{}, fmt.Errorf("spc: grand mean %v must be a finite number", grandMean)
	}
	if !(rBar > 0) || math.IsInf(rBar, 0) {
		return XbarRLimits{}, fmt.Errorf("spc: mean range %v must be positive; subgroups whose values are all equal carry no spread", rBar)
	}
	sigma := rBar / c.RangeMean
	half := 3 * sigma / math.Sqrt(float64(n))
	return XbarRLimits{
		N: n, Centre: grandMean, Sigma: sigma,
		UCL: grandMean + half, LCL: grandMean - half,
		RCentre: rBar, RUCL: c.D4 * rBar, RLCL: c.D3 * rBar,
		Constants: c,
	}, nil
}

// XbarRResult is an x̄ and R chart of rational subgroups.
type XbarRResult struct {
	XbarRLimits
	Means, Ranges []float64 // per subgroup
	Signal        []bool    // subgroup mean strictly beyond UCL or LCL
	RSignal       []bool    // subgroup range strictly beyond RUCL or below RLCL
}

// XbarR builds an x̄ and R chart from subgroups of equal size n (2 ≤ n ≤ 10)
// with table constants: x̿ = mean of subgroup means, R̄ = mean of subgroup
// ranges, limits as in XbarRFromStatistics.
func XbarR(subgroups [][]float64) (XbarRResult, error) {
	var r XbarRResult
	if len(subgroups) == 0 {
		return r, errors.New("spc: XbarR needs at least one subgroup")
	}
	n := len(subgroups[0])
	r.Means = make([]float64, len(subgroups))
	r.Ranges = make([]float64, len(subgroups))
	var sumMean, sumRange float64
	for g, s := range subgroups {
		if len(s) != n {
			return r, fmt.Errorf("spc: subgroup %d (1-based) has %d values but subgroup 1 has %d; all subgroups must be the same size", g+1, len(s), n)
		}
		lo, hi := math.Inf(1), math.Inf(-1)
		for i, v := range s {
			if !isFinite(v) {
				return r, fmt.Errorf("spc: subgroup %d value %d (1-based) is %v; remove the subgroup or fix the value", g+1, i+1, v)
			}
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
		r.Means[g] = mean(s)
		r.Ranges[g] = hi - lo
		sumMean += r.Means[g]
		sumRange += r.Ranges[g]
	}
	k := float64(len(subgroups))
	lim, err := XbarRFromStatistics(sumMean/k, sumRange/k, n)
	if err != nil {
		return r, err
	}
	r.XbarRLimits = lim
	r.Signal = make([]bool, len(subgroups))
	r.RSignal = make([]bool, len(subgroups))
	for g := range subgroups {
		r.Signal[g] = r.Means[g] > r.UCL || r.Means[g] < r.LCL
		r.RSignal[g] = r.Ranges[g] > r.RUCL || r.Ranges[g] < r.RLCL
	}
	return r, nil
}
