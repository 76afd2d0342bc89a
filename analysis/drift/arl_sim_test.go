package drift

import (
	"math/rand/v2"
	"testing"
)

// simulateARL estimates the in-control average run length to the first
// flagged point of independent N(0, 1) series with a known baseline, as
// total points observed / signals (censored at n points).
func simulateARL(rules []int, series, n int) float64 {
	rng := rand.New(rand.NewPCG(11, 13))
	ts := days(n)
	x := make([]float64, n)
	base := Baseline{ValueMM: ptr(0), SigmaMM: ptr(1)}
	var total, signalled int
	for s := 0; s < series; s++ {
		for i := range x {
			x[i] = rng.NormFloat64()
		}
		v, err := Evaluate(Input{ValuesMM: x, Times: ts, Baseline: base}, Options{Now: ts[n-1], NelsonRules: rules, TrendWindow: MinTrendPoints})
		if err != nil {
			panic(err)
		}
		run := n
		for i, p := range v.Chart.Points {
			if p.Flags != 0 {
				run = i + 1
				signalled++
				break
			}
		}
		total += run
	}
	return float64(total) / float64(signalled)
}

// The combined in-control ARL of the default design lies between the
// union bound 1/(1/370.4 + 1/500 + 1/465) ≈ 142 and the shortest single
// chart's ARL, Shewhart 3σ: 1/(2Φ(−3)) = 370.4 (derived from the normal
// distribution; EWMA λ = 0.1, L = 2.814 ≈ 500, Lucas & Saccucci 1990, from
// memory; CUSUM k = 0.5, h = 5 ≈ 465, Montgomery Table 9.3, from memory).
// Adding Nelson rules 2 and 3 shortens it.
func TestCombinedInControlARL(t *testing.T) {
	def := simulateARL(nil, 400, 2000)
	with := simulateARL([]int{2, 3}, 400, 2000)
	t.Logf("in-control ARL: default %.0f, with Nelson 2 and 3 %.0f", def, with)
	if def < 142 || def > 370.4 {
		t.Errorf("default design ARL %.0f outside [142, 370]", def)
	}
	if with >= def {
		t.Errorf("Nelson rules 2 and 3 do not shorten the ARL (%.0f ≥ %.0f)", with, def)
	}
}
