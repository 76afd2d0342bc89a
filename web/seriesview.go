package web

import (
	"context"
	"slices"
	"time"

	"halfmark"
	"halfmark/analysis/spc"
)

// seriesView is one series with what the pages show about it. Every number
// in it — baseline, σ, control limits, each point's signals, the EWMA, the
// trend, the level and the verdict word — is read from the drift engine's
// stored evaluation (halfmark.SeriesEvaluation); the dashboard never judges
// a series itself.
type seriesView struct {
	S      halfmark.Series
	Points []halfmark.Point
	Eval   *halfmark.SeriesEvaluation // nil: not evaluated yet
	// Start is the index of the first point of the current baseline
	// period (the points the engine charted).
	Start         int
	Centre, Sigma float64
	HasCentre     bool
	HasSigma      bool
	Limits        halfmark.Limits
	HasLimits     bool
	Kind          halfmark.CheckKind // kind of the newest point
	Latest        *halfmark.Point
	Deviation     *float64 // newest value − centre, mm
	Level         halfmark.Level
	Rule          string
	Verdict       string // the engine's verdict word, or "pending"
	Signal        []bool // per point: a rule family flagged it (current period only)
	EWMA          *spc.EWMAResult
	Trend         *halfmark.SeriesTrend
	Crossing      *time.Time // projected tolerance crossing (status "projected" only)
	UCL, LCL      float64
	L             float64 // control-limit width in σ
	BaselineNote  string
	FindingIDs    []int64
}

// VerdictPending is shown for a series the engine has not evaluated yet.
const VerdictPending = "pending"

// viewSeries lays a series' points beside its stored evaluation (ev may be
// nil: not evaluated yet).
func viewSeries(ser halfmark.Series, pts []halfmark.Point, ev *halfmark.SeriesEvaluation) seriesView {
	v := seriesView{S: ser, Points: pts, Eval: ev, Signal: make([]bool, len(pts)), Verdict: VerdictPending}
	if len(pts) > 0 {
		last := pts[len(pts)-1]
		v.Latest, v.Kind = &last, last.Kind
	}
	if ev == nil {
		v.BaselineNote = "not evaluated yet: the drift engine evaluates new points within seconds"
		v.Start = len(pts)
		return v
	}
	ch := &ev.Chart
	v.Verdict, v.Level, v.Rule, v.Deviation, v.FindingIDs = ev.Verdict, ev.Level, ev.Rule, ev.DeviationMM, ev.FindingIDs
	if ev.Kind != "" {
		v.Kind = ev.Kind
	}
	if ev.Limits != nil {
		v.Limits, v.HasLimits = *ev.Limits, true
	}
	v.Start = max(0, len(pts)-len(ch.Points))
	if len(ch.Points) > 0 && ev.Verdict != halfmark.VerdictNotEvaluated {
		v.Centre, v.HasCentre = ch.Centre, ev.DeviationMM != nil || ev.BaselineMM != 0 || ch.Sigma != nil
	}
	if ev.BaselineEstimated {
		v.BaselineNote = "baseline estimated from the first points of the period"
	}
	if ev.Verdict == halfmark.VerdictBaselinePending {
		v.BaselineNote = "baseline pending: too few points in the period to estimate it"
	}
	if ch.Sigma != nil && *ch.Sigma > 0 {
		v.Sigma, v.HasSigma = *ch.Sigma, true
		if ch.UCL != nil && ch.LCL != nil {
			v.UCL, v.LCL = *ch.UCL, *ch.LCL
			v.L = (v.UCL - v.Centre) / v.Sigma
		}
	}
	ew := &spc.EWMAResult{Lambda: ch.EWMALambda, L: ch.EWMAL, FirstSignal: -1}
	for i, p := range ch.Points {
		j := v.Start + i
		if j < len(v.Signal) {
			v.Signal[j] = len(p.Signals) > 0
		}
		if p.EWMA != nil && p.EWMAUCL != nil && p.EWMALCL != nil {
			ew.Z, ew.UCL, ew.LCL = append(ew.Z, *p.EWMA), append(ew.UCL, *p.EWMAUCL), append(ew.LCL, *p.EWMALCL)
			ew.Signal = append(ew.Signal, slices.Contains(p.Signals, "ewma"))
		}
	}
	if len(ew.Z) == len(ch.Points) && len(ew.Z) > 0 {
		v.EWMA = ew
	}
	v.Trend = ev.Trend
	if ev.Crossing.Status == halfmark.CrossingProjected {
		v.Crossing = ev.Crossing.ToleranceDate
	}
	return v
}

// seriesEvaluation reads a series' stored evaluation; nil when there is
// none yet (or no evaluation store).
func (s *server) seriesEvaluation(ctx context.Context, id int64) (*halfmark.SeriesEvaluation, error) {
	if s.d.Evaluations == nil {
		return nil, nil
	}
	ev, err := s.d.Evaluations.SeriesEvaluation(ctx, id)
	if halfmark.ErrorCodeOf(err) == halfmark.ENotFound {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	return &ev, nil
}

// machineViews loads every series of a machine with its stored evaluation.
func (s *server) machineViews(ctx context.Context, machineID int64) ([]seriesView, error) {
	ss, err := s.d.Series.MachineSeries(ctx, machineID)
	if err != nil {
		return nil, err
	}
	out := make([]seriesView, 0, len(ss))
	for _, ser := range ss {
		pts, err := s.d.Series.Points(ctx, ser.ID)
		if err != nil {
			return nil, err
		}
		ev, err := s.seriesEvaluation(ctx, ser.ID)
		if err != nil {
			return nil, err
		}
		out = append(out, viewSeries(ser, pts, ev))
	}
	return out, nil
}
