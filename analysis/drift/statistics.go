package drift

import (
	"fmt"
	"time"

	"halfmark"
	"halfmark/analysis/spc"
)

// statistics runs the individuals, EWMA, CUSUM and Nelson charts on the
// period's points, flags each point and records the signals of the newest
// point as Level 1.
func statistics(v *Verdict, x []float64, t []time.Time, centre, sigma float64, restart time.Time, o Options) error {
	ch := &v.Chart
	n := len(x)
	L := ShewhartL(o.FamilySize)
	ucl, lcl := centre+L*sigma, centre-L*sigma
	ch.Sigma, ch.UCL, ch.LCL = fp(sigma), fp(ucl), fp(lcl)

	ew, err := spc.NewEWMAChart(spc.EWMAOptions{Target: centre, Sigma: sigma, Lambda: o.EWMALambda, L: o.EWMAL})
	if err != nil {
		return fmt.Errorf("drift: %w", err)
	}
	ch.EWMALambda, ch.EWMAL = ew.Lambda(), ew.L()
	k, h := o.CUSUMK, o.CUSUMH
	if k == 0 {
		k = 0.5
	}
	if h == 0 {
		h = 5
	}
	cuOpts := spc.CUSUMOptions{Target: centre, Sigma: sigma, K: k, H: familyH(k, h, o.FamilySize)}
	cu, err := spc.NewCUSUMChart(cuOpts)
	if err != nil {
		return fmt.Errorf("drift: %w", err)
	}
	ch.CUSUMInterval = fp(cu.DecisionInterval())

	// One allocation for the five per-point statistics.
	buf := make([]float64, 5*n)
	var lastEW spc.EWMAPoint
	var lastCU spc.CUSUMPoint
	restarted := restart.IsZero()
	for i, xi := range x {
		p := &ch.Points[i]
		if !restarted && t[i].After(restart) {
			cu, _ = spc.NewCUSUMChart(cuOpts) // options already validated
			restarted = true
		}
		if xi > ucl || xi < lcl {
			p.Flags |= FlagShewhart
		}
		lastEW = ew.Next(xi)
		s := buf[5*i : 5*i+5 : 5*i+5]
		s[0], s[1], s[2] = lastEW.Z, lastEW.UCL, lastEW.LCL
		p.EWMA, p.EWMAUCL, p.EWMALCL = &s[0], &s[1], &s[2]
		if lastEW.Signal {
			p.Flags |= FlagEWMA
		}
		lastCU = cu.Next(xi)
		s[3], s[4] = lastCU.CPlus, lastCU.CMinus
		p.CPlus, p.CMinus = &s[3], &s[4]
		if lastCU.Signal() {
			p.Flags |= FlagCUSUM
		}
	}

	var lastNelson []int
	if len(o.NelsonRules) > 0 {
		hits, err := spc.Nelson(x, centre, sigma, o.NelsonRules...)
		if err != nil {
			return fmt.Errorf("drift: %w", err)
		}
		for _, h := range hits {
			ch.Points[h.Index].Flags |= FlagNelson
			if h.Index == n-1 {
				lastNelson = append(lastNelson, h.Rule)
			}
		}
	}

	xn, z := x[n-1], (x[n-1]-centre)/sigma
	if xn > ucl || xn < lcl {
		v.add(Signal{FamilyShewhart, fmt.Sprintf("newest value %.1f σ from the baseline (beyond %.3gσ)", z, L), halfmark.LevelInspect})
	}
	if lastEW.Signal && o.FamilySize <= 1 {
		v.add(Signal{FamilyEWMA, fmt.Sprintf("EWMA %.3f mm beyond its limit (%.3f to %.3f mm; λ = %g, L = %g)",
			lastEW.Z, lastEW.LCL, lastEW.UCL, ew.Lambda(), ew.L()), halfmark.LevelInspect})
	}
	if lastCU.Signal() {
		dir, c := "upward", lastCU.CPlus
		if !lastCU.SignalUp {
			dir, c = "downward", lastCU.CMinus
		}
		v.add(Signal{FamilyCUSUM, fmt.Sprintf("CUSUM %s shift: sum %.3f mm > H = %.3f mm; estimated mean %.3f mm",
			dir, c, cu.DecisionInterval(), lastCU.NewMean), halfmark.LevelInspect})
	}
	for _, r := range lastNelson {
		v.add(Signal{FamilyNelson, fmt.Sprintf("Nelson %d: %s", r, spc.RuleDescription(r)), halfmark.LevelInspect})
	}
	return nil
}
