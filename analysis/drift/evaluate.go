package drift

import (
	"fmt"
	"math"
	"time"

	"halfmark"
	"halfmark/analysis/spc"
)

// Baseline is a series' reference for one baseline period. A nil Value or
// Sigma is estimated from the first N points of the period (mean and
// MR̄/d2, spc.EstimateBaseline).
type Baseline struct {
	ValueMM *float64
	SigmaMM *float64
	// Start drops earlier points: they belong to a previous period (before
	// a service event). Zero keeps every point.
	Start time.Time
}

// Limits are the tolerance and action limit on |deviation|, mm. Zero
// disables the limit (the tolerance book sets none).
type Limits struct {
	ToleranceMM, ActionMM float64
}

// Input is one series.
type Input struct {
	ValuesMM []float64   // measurement order
	Times    []time.Time // one per value, non-decreasing
	Baseline Baseline
	Limits   Limits
	// CUSUMRestart restarts the CUSUM sums after this time (an acknowledged
	// CUSUM signal): points at or before it do not accumulate. Zero: no
	// restart.
	CUSUMRestart time.Time
}

// Evaluate computes the verdict of one series. Values and times must have
// the same length; times must be non-decreasing. An empty period gives a
// Level-0 verdict with BaselinePending set.
//
// Deviation d = x_n − baseline (mm); statistics use z = (x − baseline)/σ.
// Charts: individuals (centre ± 3σ), EWMA (λ, L; time-varying limits),
// two-sided tabular CUSUM (k, h), Nelson rules on the values in
// measurement order, and a trend (Theil–Sen by default) against time over
// the newest TrendWindow points; see package spc for each formula.
func Evaluate(in Input, o Options) (Verdict, error) {
	var v Verdict
	o, err := o.withDefaults()
	if err != nil {
		return v, err
	}
	if len(in.ValuesMM) != len(in.Times) {
		return v, fmt.Errorf("drift: %d values but %d times; give one time per value", len(in.ValuesMM), len(in.Times))
	}
	if err := checkLimits(in.Limits); err != nil {
		return v, err
	}
	x, t := in.ValuesMM, in.Times
	if !in.Baseline.Start.IsZero() {
		i := 0
		for i < len(t) && t[i].Before(in.Baseline.Start) {
			i++
		}
		x, t = x[i:], t[i:]
	}
	for i := range x {
		if math.IsNaN(x[i]) || math.IsInf(x[i], 0) {
			return v, fmt.Errorf("drift: value %d (%s) is %v; every value must be a finite number of mm", i+1, t[i].Format(time.RFC3339), x[i])
		}
		if i > 0 && t[i].Before(t[i-1]) {
			return v, fmt.Errorf("drift: time %d (%s) is before the one before it; sort the points by measurement time", i+1, t[i].Format(time.RFC3339))
		}
	}
	v.N = len(x)
	v.ToleranceMM, v.ActionMM = in.Limits.ToleranceMM, in.Limits.ActionMM
	v.Chart.Points = make([]ChartPoint, len(x))
	if len(x) == 0 {
		v.BaselinePending = in.Baseline.ValueMM == nil || in.Baseline.SigmaMM == nil
		if in.Baseline.ValueMM != nil {
			v.BaselineMM = *in.Baseline.ValueMM
		}
		v.Chart.Centre = v.BaselineMM
		return v, nil
	}

	centre, sigma, pending := baseline(x, in.Baseline, o.BaselinePoints)
	if o.FullBaseline && len(x) < o.BaselinePoints && (in.Baseline.ValueMM == nil || in.Baseline.SigmaMM == nil) {
		pending = true
		if in.Baseline.ValueMM == nil {
			centre = x[0]
		}
	}
	v.BaselinePending = pending
	v.BaselineDerived = in.Baseline.ValueMM == nil || in.Baseline.SigmaMM == nil
	v.BaselineMM = centre
	n := len(x)
	last := t[n-1]
	v.LastAt, v.LastMM = &last, x[n-1]
	if !pending || in.Baseline.ValueMM != nil {
		d := x[n-1] - centre
		v.DeviationMM = &d
	}

	ch := &v.Chart
	ch.Centre = centre
	limitLines(ch, centre, in.Limits)
	for i := range x {
		p := &ch.Points[i]
		p.Index, p.Time, p.ValueMM, p.DeviationMM = i+1, t[i], x[i], x[i]-centre
		if v.DeviationMM != nil && in.Limits.ToleranceMM > 0 && math.Abs(p.DeviationMM) > in.Limits.ToleranceMM {
			p.Flags |= FlagLimit
		}
	}

	// Levels 2 and 3 from the limits.
	if v.DeviationMM != nil {
		d := math.Abs(*v.DeviationMM)
		switch {
		case in.Limits.ActionMM > 0 && d > in.Limits.ActionMM:
			v.add(Signal{FamilyLimit, fmt.Sprintf("beyond action limit (|%.2f| > %.2f mm)", *v.DeviationMM, in.Limits.ActionMM), halfmark.LevelImmediate})
		case in.Limits.ToleranceMM > 0 && d > in.Limits.ToleranceMM:
			v.add(Signal{FamilyLimit, fmt.Sprintf("beyond tolerance (|%.2f| > %.2f mm)", *v.DeviationMM, in.Limits.ToleranceMM), halfmark.LevelScheduled})
		}
	}

	if !pending {
		v.SigmaMM = &sigma
		if err := statistics(&v, x, t, centre, sigma, in.CUSUMRestart, o); err != nil {
			return v, err
		}
		trend(&v, x, t, centre, in.Limits, o)
	}
	for i := n - 1; i >= 0 && ch.Points[i].Flags == 0; i-- {
		v.InControlRun++
	}
	for i := range ch.Points {
		ch.Points[i].Signals = flagNames(ch.Points[i].Flags)
	}
	v.Resolved = v.Level == halfmark.LevelInControl && v.InControlRun >= o.InControlPoints
	return v, nil
}

// add records a signal and raises the level when it is the most severe.
func (v *Verdict) add(s Signal) {
	v.Signals = append(v.Signals, s)
	if s.Level > v.Level {
		v.Level, v.Family, v.Rule = s.Level, s.Family, s.Rule
	}
}

func checkLimits(l Limits) error {
	for _, f := range [...]struct {
		name string
		v    float64
	}{{"tolerance", l.ToleranceMM}, {"action limit", l.ActionMM}} {
		if math.IsNaN(f.v) || math.IsInf(f.v, 0) || f.v < 0 {
			return fmt.Errorf("drift: %s %v mm must be a non-negative number (0: none)", f.name, f.v)
		}
	}
	if l.ToleranceMM > 0 && l.ActionMM > 0 && l.ActionMM < l.ToleranceMM {
		return fmt.Errorf("drift: action limit %v mm is below the tolerance %v mm; the action limit must be the wider one", l.ActionMM, l.ToleranceMM)
	}
	return nil
}

// baseline returns the centre and sigma in force, estimating what is
// missing from the first n points; pending is true when they cannot be
// estimated yet (fewer than spc.MinBaselinePoints points, or no spread).
func baseline(x []float64, b Baseline, n int) (centre, sigma float64, pending bool) {
	if b.ValueMM != nil && b.SigmaMM != nil {
		return *b.ValueMM, *b.SigmaMM, false
	}
	c, s, err := spc.EstimateBaseline(x, n)
	if b.ValueMM != nil {
		c = *b.ValueMM
	}
	if b.SigmaMM != nil {
		s, err = *b.SigmaMM, nil
	}
	if err != nil {
		if b.ValueMM == nil {
			c = x[0]
		}
		return c, 0, true
	}
	return c, s, false
}

func limitLines(ch *Chart, centre float64, l Limits) {
	if l.ToleranceMM > 0 {
		ch.ToleranceUpper, ch.ToleranceLower = fp(centre+l.ToleranceMM), fp(centre-l.ToleranceMM)
	}
	if l.ActionMM > 0 {
		ch.ActionUpper, ch.ActionLower = fp(centre+l.ActionMM), fp(centre-l.ActionMM)
	}
}

func fp(v float64) *float64 { return &v }

var flagFamilies = [...]string{FamilyLimit, FamilyShewhart, FamilyEWMA, FamilyCUSUM, FamilyNelson}

// flagNameSets holds the family names of every flag combination, so that
// chart points share them instead of allocating (read-only).
var flagNameSets = func() (sets [1 << len(flagFamilies)][]string) {
	for f := 1; f < len(sets); f++ {
		for i, name := range flagFamilies {
			if f&(1<<i) != 0 {
				sets[f] = append(sets[f], name)
			}
		}
	}
	return sets
}()

func flagNames(f uint8) []string { return flagNameSets[f] }
