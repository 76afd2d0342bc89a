package web

import (
	"context"
	"fmt"
	"math"
	"time"

	"halfmark"
	"halfmark/analysis/drift"
	"halfmark/analysis/spc"
)

// seriesView is one series with what the pages show about it: its baseline
// (centre, σ), the local limits, each point's signal, the EWMA chart, the
// drift trend and its projected crossing of the tolerance.
type seriesView struct {
	S      halfmark.Series
	Points []halfmark.Point
	// Start is the index of the first point of the current baseline
	// period; control statistics use Points[Start:].
	Start              int
	Centre, Sigma      float64
	HasCentre          bool
	HasSigma           bool
	Limits             halfmark.Limits
	HasLimits          bool
	Kind               halfmark.CheckKind // kind of the newest point
	Latest             *halfmark.Point
	Deviation          *float64 // newest value − centre, mm
	Level              halfmark.Level
	Rule               string
	Signal             []bool // per point: beyond L·σ or beyond tolerance (current period only)
	EWMA               *spc.EWMAResult
	Trend              *spc.TrendResult
	Crossing           *time.Time
	UCL, LCL           float64 // centre ± L·σ
	L                  float64 // control-limit width in σ (3 for a lone series)
	Family             int     // series of the machine
	BaselineNote       string
	ToleranceMissingBy string
}

// trendMinPoints is the fewest points for a Theil–Sen trend with a 95 %
// interval (spc.Trend needs n ≥ 6).
const trendMinPoints = 6

// viewSeries computes a series' view from its points. It never fails on
// data: what cannot be computed is left out and said in BaselineNote.
// family is the number of series of the machine: the control limits are
// widened with it exactly as the drift engine widens them
// (drift.ShewhartL), and a family member's EWMA does not raise Level 1.
func (s *server) viewSeries(ser halfmark.Series, pts []halfmark.Point, now time.Time, family int) seriesView {
	v := seriesView{S: ser, Points: pts, Signal: make([]bool, len(pts)), L: drift.ShewhartL(family), Family: family}
	if len(pts) == 0 {
		v.BaselineNote = "no points yet"
		return v
	}
	last := pts[len(pts)-1]
	v.Latest = &last
	v.Kind = last.Kind
	if b := ser.Baseline; b != nil {
		for v.Start < len(pts) && pts[v.Start].MeasuredAt.Before(b.ValidFrom) {
			v.Start++
		}
	}
	cur := pts[v.Start:]
	vals := make([]float64, len(cur))
	for i, p := range cur {
		vals[i] = p.Value
	}
	var estC, estS float64
	var estErr error
	if len(vals) > 0 {
		estC, estS, estErr = spc.EstimateBaseline(vals, spc.DefaultBaselinePoints)
	} else {
		estErr = fmt.Errorf("no points since the baseline period began")
	}
	if b := ser.Baseline; b != nil && b.ValueMM != nil {
		v.Centre, v.HasCentre = *b.ValueMM, true
	} else if estErr == nil {
		v.Centre, v.HasCentre = estC, true
		v.BaselineNote = fmt.Sprintf("baseline estimated from the first %d points of the period", min(len(vals), spc.DefaultBaselinePoints))
	} else {
		v.BaselineNote = "no baseline yet: " + estErr.Error()
	}
	if b := ser.Baseline; b != nil && b.SigmaMM != nil {
		v.Sigma, v.HasSigma = *b.SigmaMM, true
	} else if estErr == nil && estS > 0 {
		v.Sigma, v.HasSigma = estS, true
	}
	v.Limits, v.HasLimits = s.d.Tolerances.Limits(ser.Quantity, v.Kind, ser.Edge, false)
	if !v.HasCentre {
		return v
	}
	dev := last.Value - v.Centre
	if v.Start < len(pts) {
		v.Deviation = &dev
	}
	if v.HasSigma {
		v.UCL, v.LCL = v.Centre+v.L*v.Sigma, v.Centre-v.L*v.Sigma
	}
	for i := v.Start; i < len(pts); i++ {
		d := math.Abs(pts[i].Value - v.Centre)
		v.Signal[i] = (v.HasSigma && (pts[i].Value > v.UCL || pts[i].Value < v.LCL)) ||
			(v.HasLimits && d > v.Limits.ToleranceMM)
	}
	if v.HasSigma && len(vals) > 0 {
		if r, err := spc.EWMA(vals, spc.EWMAOptions{Target: v.Centre, Sigma: v.Sigma}); err == nil {
			v.EWMA = &r
		}
	}
	if len(cur) >= trendMinPoints {
		times := make([]time.Time, len(cur))
		for i, p := range cur {
			times[i] = p.MeasuredAt
		}
		if tr, err := spc.TrendTimes(times, vals, spc.TrendOptions{}); err == nil {
			v.Trend = &tr
			if v.HasLimits {
				up := spc.ProjectCrossing(tr, now, v.Centre+v.Limits.ToleranceMM)
				down := spc.ProjectCrossing(tr, now, v.Centre-v.Limits.ToleranceMM)
				v.Crossing = earliest(up, down)
			}
		}
	}
	v.Level, v.Rule = v.level()
	return v
}

func earliest(a, b *time.Time) *time.Time {
	switch {
	case a == nil:
		return b
	case b == nil:
		return a
	case b.Before(*a):
		return b
	}
	return a
}

// level is the TG-142 level of the newest point: beyond the action limit
// (3), beyond tolerance (2), a statistical signal or a projected crossing
// inside 30 days (1).
func (v seriesView) level() (halfmark.Level, string) {
	if v.Deviation == nil {
		return halfmark.LevelInControl, ""
	}
	d := math.Abs(*v.Deviation)
	n := len(v.Points) - 1
	switch {
	case v.HasLimits && d > v.Limits.ActionMM:
		return halfmark.LevelImmediate, "beyond action limit"
	case v.HasLimits && d > v.Limits.ToleranceMM:
		return halfmark.LevelScheduled, "beyond tolerance"
	case v.HasSigma && v.Signal[n]:
		return halfmark.LevelInspect, fmt.Sprintf("beyond %.3gσ control limit", v.L)
	case v.Family <= 1 && v.EWMA != nil && len(v.EWMA.Signal) > 0 && v.EWMA.Signal[len(v.EWMA.Signal)-1]:
		return halfmark.LevelInspect, "EWMA signal"
	case v.Crossing != nil && v.Latest != nil && v.Crossing.Sub(v.Latest.MeasuredAt) < 30*24*time.Hour:
		return halfmark.LevelInspect, "trend projected to cross tolerance"
	}
	return halfmark.LevelInControl, ""
}

// machineViews loads and computes every series of a machine.
func (s *server) machineViews(ctx context.Context, machineID int64) ([]seriesView, error) {
	ss, err := s.d.Series.MachineSeries(ctx, machineID)
	if err != nil {
		return nil, err
	}
	now := s.d.Now()
	out := make([]seriesView, 0, len(ss))
	for _, ser := range ss {
		pts, err := s.d.Series.Points(ctx, ser.ID)
		if err != nil {
			return nil, err
		}
		out = append(out, s.viewSeries(ser, pts, now, len(ss)))
	}
	return out, nil
}
