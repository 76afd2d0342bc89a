package drift

import (
	"fmt"
	"math"
	"regexp"
	"strconv"
	"time"

	"halfmark"
	"halfmark/analysis/spc"
)

// SeriesInput is one series as loaded from the store: its identity, the
// baseline in force and its current points in measurement order.
type SeriesInput struct {
	ID, MachineID, BeamID                  int64
	MachineName, BeamLabel, Geometry, Edge string
	Quantity                               halfmark.Quantity
	Method                                 halfmark.Method
	BaselineValueMM, BaselineSigmaMM       *float64   // baseline in force; nil = estimate from the period's first points
	BaselineFrom                           *time.Time // start of the baseline period
	CUSUMRestart                           *time.Time
	Times                                  []time.Time
	ValuesMM                               []float64
	Kinds                                  []halfmark.CheckKind
	CheckIDs                               []string
	// FamilySize is the number of series charted together for this
	// series' own (per-series) charts; EvaluateMachine sets it to the
	// machine's series of the same cadence. 0 means 1.
	FamilySize int
}

// SeriesResult is the stored judgement of one series.
type SeriesResult struct {
	SeriesID   int64
	Evaluation halfmark.SeriesEvaluation
	// Signals are the families firing on the newest point, for per-series
	// evidence alerts (never notified on their own).
	Signals []Signal
	// Verdict is the engine's full per-series verdict (chart included in
	// Evaluation.Chart).
	Verdict Verdict
}

// LevelOf is the TG-142 level of a deviation d (mm) against limits l:
//
//	3  |d| > action limit,  2  |d| > tolerance,  else 0
//
// "Beyond" is strict (a value on a limit is inside); a zero limit is not
// set (Klein et al., AAPM TG-142, Med Phys 36:4197, 2009). This is the
// only level rule: every screen reads levels computed with it.
func LevelOf(d float64, l halfmark.Limits) halfmark.Level {
	switch d = math.Abs(d); {
	case l.ActionMM > 0 && d > l.ActionMM:
		return halfmark.LevelImmediate
	case l.ToleranceMM > 0 && d > l.ToleranceMM:
		return halfmark.LevelScheduled
	}
	return halfmark.LevelInControl
}

// KindOf is the check kind of the newest point (it chooses the limits);
// morning when the series has no kinds.
func KindOf(s *SeriesInput) halfmark.CheckKind {
	if n := len(s.Kinds); n > 0 && s.Kinds[n-1] != "" {
		return s.Kinds[n-1]
	}
	return halfmark.KindMorning
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
func Asymmetric(s *SeriesInput) bool {
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

// prepared is a series with its baseline resolved: the points of the
// period, their deviations and the σ the charts use.
type prepared struct {
	in        *SeriesInput
	times     []time.Time
	dev       []float64 // x − centre, mm
	kinds     []halfmark.CheckKind
	centre    float64
	hasCentre bool    // the centre is known (set, zero for light offsets, or estimated)
	sigma     float64 // σ used by the charts (widened when estimated), 0 while pending
	estimated bool    // the centre came from the period's first points
	estSigma  bool    // σ came from the period's first points
	limits    *halfmark.Limits
	kind      halfmark.CheckKind
	asym      bool
	err       error
	res       SeriesResult
}

// EvaluateSeries judges one series at now: the per-series inputs (the
// light-offset zero baseline, symmetric or asymmetric jaws, the check kind
// of the newest point, the limit lookup), the control charts of Evaluate
// and the verdict word. Bad data give a "not_evaluated" result and no
// error; the error is only for a design that does not validate.
func EvaluateSeries(s SeriesInput, book halfmark.ToleranceBook, d Detection, now time.Time) (SeriesResult, error) {
	if err := d.Validate(); err != nil {
		return SeriesResult{}, err
	}
	p := prepare(&s, book, d, now)
	return p.res, nil
}

func prepare(s *SeriesInput, book halfmark.ToleranceBook, d Detection, now time.Time) *prepared {
	p := &prepared{in: s, kind: KindOf(s), asym: Asymmetric(s)}
	ev := &p.res.Evaluation
	p.res.SeriesID = s.ID
	ev.SeriesID, ev.EvaluatedAt, ev.Kind, ev.Method, ev.Asymmetric = s.ID, now, p.kind, s.Method, p.asym
	if book != nil {
		ev.ToleranceHash = book.Hash()
		if l, ok := book.Limits(s.Quantity, p.kind, s.Edge, p.asym); ok {
			p.limits = &l
		}
	}
	ev.Limits = p.limits
	fail := func(err error) *prepared {
		p.err = err
		ev.Level, ev.Verdict, ev.Rule = 0, halfmark.VerdictNotEvaluated, "not evaluated: "+err.Error()
		ev.Crossing = halfmark.FindingCrossing{Status: halfmark.CrossingNotSignificant}
		ev.Chart = halfmark.SeriesChart{}
		p.sigma, p.hasCentre = 0, false
		return p
	}
	if len(s.ValuesMM) != len(s.Times) {
		return fail(fmt.Errorf("%d values but %d times", len(s.ValuesMM), len(s.Times)))
	}
	// The period's points.
	lo := 0
	if s.BaselineFrom != nil {
		for lo < len(s.Times) && s.Times[lo].Before(*s.BaselineFrom) {
			lo++
		}
	}
	x, ts := s.ValuesMM[lo:], s.Times[lo:]
	for i := range x {
		if math.IsNaN(x[i]) || math.IsInf(x[i], 0) {
			return fail(fmt.Errorf("value %d (%s) is %v; every value must be a finite number of mm", lo+i+1, ts[i].Format(time.RFC3339), x[i]))
		}
		if i > 0 && ts[i].Before(ts[i-1]) {
			return fail(fmt.Errorf("time %d (%s) is before the one before it; points must be in measurement order", lo+i+1, ts[i].Format(time.RFC3339)))
		}
	}
	if len(s.Kinds) == len(s.Times) {
		p.kinds = s.Kinds[lo:]
	}

	// The baseline: set, zero for a light offset, or estimated.
	b := Baseline{ValueMM: s.BaselineValueMM, SigmaMM: s.BaselineSigmaMM}
	if s.BaselineFrom != nil {
		b.Start = *s.BaselineFrom
	}
	if b.ValueMM == nil && s.Quantity == halfmark.QLightOffset {
		// Light/radiation coincidence is judged against zero offset
		// (TG-142 states it as an absolute tolerance).
		zero := 0.0
		b.ValueMM = &zero
	}
	if b.ValueMM == nil || b.SigmaMM == nil {
		c, sg, err := spc.EstimateBaseline(x, d.BaselinePoints)
		if err == nil && len(x) >= d.BaselinePoints {
			if b.ValueMM == nil {
				p.estimated = true
				b.ValueMM = &c
			}
			if b.SigmaMM == nil {
				p.estSigma = true
				b.SigmaMM = &sg
			}
		}
	}
	in := Input{ValuesMM: x, Times: ts, Baseline: Baseline{ValueMM: b.ValueMM, SigmaMM: b.SigmaMM}}
	if p.limits != nil {
		in.Limits = Limits{ToleranceMM: p.limits.ToleranceMM, ActionMM: p.limits.ActionMM}
	}
	if s.CUSUMRestart != nil {
		in.CUSUMRestart = *s.CUSUMRestart
	}
	o := Options{BaselinePoints: d.BaselinePoints, FullBaseline: true, NelsonRules: []int{}, Horizon: time.Duration(d.HorizonDays * float64(24*time.Hour)),
		InControlPoints: d.ResolveSessions, FamilySize: max(s.FamilySize, 1), Now: now}
	v, err := Evaluate(in, o)
	if err != nil {
		return fail(err)
	}
	v.BaselineDerived = p.estimated || s.BaselineSigmaMM == nil
	if v.BaselinePending && b.ValueMM == nil {
		// No centre yet: Evaluate's provisional centre is not a baseline.
		v.DeviationMM = nil
	}
	p.times = ts
	if b.ValueMM != nil {
		p.hasCentre, p.centre = true, *b.ValueMM
		p.dev = make([]float64, len(x))
		for i := range x {
			p.dev[i] = x[i] - p.centre
		}
	}
	if !v.BaselinePending && v.SigmaMM != nil {
		p.sigma = *v.SigmaMM
	}
	for i := range v.Chart.Points {
		if j := lo + i; j < len(s.CheckIDs) {
			v.Chart.Points[i].CheckID = s.CheckIDs[j]
		}
		if p.kinds != nil {
			v.Chart.Points[i].Kind = p.kinds[i]
		}
	}
	p.res.Verdict = v
	p.res.Signals = v.Signals
	ev.Level, ev.Rule, ev.BaselineMM, ev.BaselineEstimated, ev.DeviationMM = v.Level, v.Rule, v.BaselineMM, v.BaselineDerived, v.DeviationMM
	for _, sg := range v.Signals {
		ev.Rules = appendUnique(ev.Rules, sg.Family)
	}
	ev.Chart = v.Chart
	ev.Verdict = verdictWord(v, p)
	ev.Crossing = seriesCrossing(v, now, d)
	return p
}

// verdictWord says what was checked and what it found: "in_control" only
// where the control charts ran and passed, "within_tolerance" where only
// the limits could be checked.
func verdictWord(v Verdict, p *prepared) string {
	switch {
	case v.Level > halfmark.LevelInControl:
		return halfmark.VerdictSignal
	case !v.BaselinePending && v.SigmaMM != nil:
		return halfmark.VerdictInControl
	case v.DeviationMM != nil && p.limits != nil:
		return halfmark.VerdictWithinTolerance
	}
	return halfmark.VerdictBaselinePending
}

// seriesCrossing states a series' own projected crossing: never a date
// for a series already beyond its tolerance or without a significant
// trend.
func seriesCrossing(v Verdict, now time.Time, d Detection) halfmark.FindingCrossing {
	c := halfmark.FindingCrossing{Status: halfmark.CrossingNotSignificant}
	switch {
	case v.Level >= halfmark.LevelScheduled:
		c.Status = halfmark.CrossingAlreadyBeyond
	case v.Trend == nil || !v.Trend.Significant || v.Trend.Tolerance == nil:
	case v.Trend.Tolerance.At.After(now.Add(time.Duration(d.HorizonDays * float64(24*time.Hour)))):
		c.Status = halfmark.CrossingBeyondHorizon
	default:
		c.Status = halfmark.CrossingProjected
		at := v.Trend.Tolerance.At
		c.ToleranceDate = &at
		if a := v.Trend.Action; a != nil && !a.At.After(now.Add(time.Duration(d.HorizonDays*float64(24*time.Hour)))) {
			aa := a.At
			c.ActionDate = &aa
		}
	}
	return c
}

func appendUnique(s []string, v string) []string {
	for _, x := range s {
		if x == v {
			return s
		}
	}
	return append(s, v)
}
