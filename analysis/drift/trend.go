package drift

import (
	"fmt"
	"time"

	"halfmark"
	"halfmark/analysis/spc"
)

// trend fits the newest TrendWindow points against time and projects when
// the line reaches baseline ± tolerance and baseline ± action limit. A
// significant trend that reaches the tolerance before Now + Horizon is a
// Level-1 signal (TG-142 Level 1: a change still inside tolerance that
// needs inspection). The projection looks forward from the newest point
// along the fitted line (spc.ProjectCrossing); when the line is already
// beyond a limit at the newest point and still moving outward, the
// crossing is the newest point's time.
func trend(v *Verdict, x []float64, t []time.Time, centre float64, l Limits, o Options) {
	n := len(x)
	w := min(n, o.TrendWindow)
	if w < MinTrendPoints {
		return
	}
	xs, ts := x[n-w:], t[n-w:]
	if !ts[w-1].After(ts[0]) {
		return
	}
	tr, err := spc.TrendTimes(ts, xs, spc.TrendOptions{Method: o.TrendMethod})
	if err != nil {
		return // too few distinct times for an interval: no trend verdict
	}
	last := ts[w-1]
	s := &TrendSummary{
		Method: string(tr.Method), Points: w, SlopePer30d: tr.SlopePer30d, CILow: tr.CILow, CIHigh: tr.CIHigh,
		Significant: tr.Significant, FittedFirst: tr.ValueAt(tr.Day(ts[0])), FittedLast: tr.ValueAt(tr.Day(last)), From: ts[0],
	}
	v.Trend = s
	s.Tolerance = crossing(tr, last, centre, l.ToleranceMM, "tolerance")
	s.Action = crossing(tr, last, centre, l.ActionMM, "action")
	for _, c := range [...]*Crossing{s.Tolerance, s.Action} {
		if c != nil && (v.Projected == nil || c.At.Before(v.Projected.At)) {
			v.Projected = c
		}
	}
	if c := s.Tolerance; c != nil && !c.At.After(o.Now.Add(o.Horizon)) {
		days := c.At.Sub(o.Now).Hours() / 24
		v.add(Signal{FamilyTrend, fmt.Sprintf("trend %+.2f mm/30 d (95%% CI %+.2f to %+.2f) reaches the %s tolerance %.2f mm in %.0f days (%s)",
			tr.SlopePer30d, tr.CILow, tr.CIHigh, c.Side, c.MM, max(days, 0), c.At.Format("2006-01-02")), halfmark.LevelInspect})
	}
}

// crossing projects when the trend reaches centre ± half (mm); nil for a
// zero limit, a trend that is not significant or one moving away.
func crossing(tr spc.TrendResult, last time.Time, centre, half float64, name string) *Crossing {
	if half <= 0 || !tr.Significant || tr.SlopePerDay == 0 {
		return nil
	}
	side, lim := "upper", centre+half
	if tr.SlopePerDay < 0 {
		side, lim = "lower", centre-half
	}
	fitted := tr.ValueAt(tr.Day(last))
	if (side == "upper" && fitted > lim) || (side == "lower" && fitted < lim) {
		return &Crossing{At: last, Limit: name, Side: side, MM: lim}
	}
	at := spc.ProjectCrossing(tr, last, lim)
	if at == nil {
		return nil
	}
	return &Crossing{At: *at, Limit: name, Side: side, MM: lim}
}
