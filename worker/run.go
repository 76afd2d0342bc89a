package worker

import (
	"context"
	"fmt"
	"math"
	"regexp"
	"strconv"
	"strings"
	"time"

	"halfmark"
	"halfmark/analysis/drift"
	"halfmark/db"
)

// Summary counts what an evaluation run did.
type Summary struct {
	Series int
	Points int
	Levels [4]int // series per current level

	OverdueOpened, OverdueResolved int // beam-level overdue alerts
	Took                           time.Duration
}

func (s Summary) String() string {
	return fmt.Sprintf("%d series, %d points; level 1/2/3: %d/%d/%d; overdue alerts +%d −%d; %s", s.Series, s.Points,
		s.Levels[1], s.Levels[2], s.Levels[3], s.OverdueOpened, s.OverdueResolved, s.Took.Round(time.Millisecond))
}

// Evaluate evaluates every series (full) or those with new points or
// baselines since their last evaluation, in batches, and stores the
// results with the tolerance hash in force.
func (w *Worker) Evaluate(ctx context.Context, full bool) (Summary, error) {
	start := w.cfg.Now()
	var sum Summary
	ids, err := w.db.SeriesToEvaluate(ctx, !full)
	if err != nil {
		return sum, err
	}
	book := w.book.Load()
	for lo := 0; lo < len(ids); lo += w.cfg.BatchSize {
		batch := ids[lo:min(lo+w.cfg.BatchSize, len(ids))]
		now := w.cfg.Now()
		ss, err := w.db.LoadEvalSeries(ctx, batch, now)
		if err != nil {
			return sum, err
		}
		evs := EvaluateBatch(ss, book, w.cfg.Drift, now)
		if err := w.db.RecordEvaluations(ctx, evs, w.cfg.EnqueueAlert); err != nil {
			return sum, err
		}
		for i := range ss {
			sum.Points += len(ss[i].ValuesMM)
		}
		for _, e := range evs {
			sum.Levels[e.Level]++
		}
		sum.Series += len(evs)
	}
	if sum.OverdueOpened, sum.OverdueResolved, err = w.db.SyncOverdueAlerts(ctx, w.cfg.Now(), w.cfg.Status); err != nil {
		return sum, err
	}
	sum.Took = w.cfg.Now().Sub(start)
	return sum, nil
}

// EvaluateBatch evaluates loaded series (pure: no I/O). A series whose
// data cannot be evaluated is stored at Level 0 with the reason as its
// rule rather than stopping the batch.
func EvaluateBatch(ss []db.EvalSeries, book halfmark.ToleranceBook, o drift.Options, now time.Time) []db.Evaluation {
	o.Now = now
	evs := make([]db.Evaluation, len(ss))
	verdicts := make([]drift.Verdict, len(ss))
	for i := range ss {
		v, lim, details := EvaluateSeries(&ss[i], book, o)
		verdicts[i] = v
		evs[i] = evaluation(&ss[i], v, lim, details, book.Hash(), now)
	}
	attribute(ss, verdicts, evs, book)
	return evs
}

// Details is what an evaluation stores besides its level: the verdict
// without the per-point chart, the limits and where they come from.
type Details struct {
	Verdict     drift.Verdict      `json:"verdict"`
	Kind        halfmark.CheckKind `json:"kind"`
	Asymmetric  bool               `json:"asymmetric"`
	Limits      *halfmark.Limits   `json:"limits"`
	Error       string             `json:"error,omitempty"`
	Pair        *PairCheck         `json:"pair,omitempty"`
	Bank        *BankCheck         `json:"bank,omitempty"`
	Tolerances  string             `json:"tolerances"`
	Shipped     bool               `json:"shipped_tolerances"`
	ChartPoints int                `json:"chart_points"`
}

// EvaluateSeries evaluates one loaded series with the limits the book sets
// for its newest point's check kind. The verdict keeps its chart.
func EvaluateSeries(s *db.EvalSeries, book halfmark.ToleranceBook, o drift.Options) (drift.Verdict, *halfmark.Limits, *Details) {
	kind := kindOf(s)
	asym := Asymmetric(s)
	det := &Details{Kind: kind, Asymmetric: asym, Tolerances: book.Source(), Shipped: book.IsShippedExample()}
	in := drift.Input{ValuesMM: s.ValuesMM, Times: s.Times}
	if o.FamilySize == 0 {
		o.FamilySize = s.FamilySize
	}
	in.Baseline.ValueMM, in.Baseline.SigmaMM = s.BaselineValueMM, s.BaselineSigmaMM
	if s.BaselineFrom != nil {
		in.Baseline.Start = *s.BaselineFrom
	}
	if in.Baseline.ValueMM == nil && s.Quantity == halfmark.QLightOffset {
		// Light/radiation coincidence is judged against zero offset
		// (TG-142 states it as an absolute tolerance).
		zero := 0.0
		in.Baseline.ValueMM = &zero
	}
	if s.CUSUMRestart != nil {
		in.CUSUMRestart = *s.CUSUMRestart
	}
	var limp *halfmark.Limits
	if l, ok := book.Limits(s.Quantity, kind, s.Edge, asym); ok {
		in.Limits = drift.Limits{ToleranceMM: l.ToleranceMM, ActionMM: l.ActionMM}
		limp = &l
	}
	det.Limits = limp
	v, err := drift.Evaluate(in, o)
	if err != nil {
		det.Error = err.Error()
		v = drift.Verdict{Rule: "not evaluated: " + err.Error(), N: len(s.ValuesMM)}
	}
	det.ChartPoints = len(v.Chart.Points)
	return v, limp, det
}

var geometrySize = regexp.MustCompile(`^([0-9.]+)×([0-9.]+) cm`)

// asymmetryMM is how far (mm) a jaw's baseline may sit from half the
// nominal field before the setting counts as asymmetric: well above any
// tolerance, well below a half-beam block (common practice).
const asymmetryMM = 5.0

// Asymmetric reports whether a jaw position series belongs to an
// asymmetric setting: its baseline (or first value) differs from half the
// nominal field side of its geometry ("10×10 cm, iso" → 50 mm) by more
// than 5 mm. Other quantities and unparsable geometries count as
// symmetric.
func Asymmetric(s *db.EvalSeries) bool {
	e, err := halfmark.ParseEdge(s.Edge)
	if err != nil || e.Jaw == "" || s.Quantity != halfmark.QPosition {
		return false
	}
	m := geometrySize.FindStringSubmatch(s.Geometry)
	if m == nil {
		return false
	}
	side := m[1]
	if e.Axis() == "Y" {
		side = m[2]
	}
	cm, err := strconv.ParseFloat(side, 64)
	if err != nil {
		return false
	}
	var pos float64
	switch {
	case s.BaselineValueMM != nil:
		pos = *s.BaselineValueMM
	case len(s.ValuesMM) > 0:
		pos = s.ValuesMM[0]
	default:
		return false
	}
	return math.Abs(pos-cm*10/2) > asymmetryMM
}

func evaluation(s *db.EvalSeries, v drift.Verdict, lim *halfmark.Limits, det *Details, hash string, now time.Time) db.Evaluation {
	e := db.Evaluation{Series: *s, At: now, ToleranceHash: hash, Level: v.Level, Rule: v.Rule,
		DeviationMM: v.DeviationMM, LastMeasured: v.LastAt, BackInControl: v.Resolved}
	e.Series.Times, e.Series.ValuesMM, e.Series.Kinds = nil, nil, nil
	if lim != nil {
		e.ToleranceMM, e.ActionMM = &lim.ToleranceMM, &lim.ActionMM
	}
	if v.Projected != nil {
		at := v.Projected.At
		e.Projected = &at
	}
	d := *det
	d.Verdict = v
	d.Verdict.Chart.Points = nil
	e.Details = &d
	for _, sg := range v.Signals {
		e.Signals = append(e.Signals, db.AlertSignal{Family: sg.Family, Rule: sg.Rule, Level: sg.Level, Message: message(s, v, lim, sg)})
	}
	return e
}

// message says which machine, beam, edge, how far and how soon.
func message(s *db.EvalSeries, v drift.Verdict, lim *halfmark.Limits, sg drift.Signal) string {
	var b strings.Builder
	fmt.Fprintf(&b, "%s, %s, %s %s (%s): %s", s.MachineName, s.BeamLabel, s.Edge, s.Quantity, s.Geometry, sg.Rule)
	if v.DeviationMM != nil {
		fmt.Fprintf(&b, "; newest value %+.2f mm from baseline", *v.DeviationMM)
	}
	if lim != nil {
		fmt.Fprintf(&b, " (tolerance %.2f mm, action %.2f mm)", lim.ToleranceMM, lim.ActionMM)
	}
	if v.Projected != nil && sg.Level < halfmark.LevelScheduled {
		fmt.Fprintf(&b, "; projected to reach the %s on %s", v.Projected.Limit, v.Projected.At.Format("2006-01-02"))
	}
	return b.String()
}
