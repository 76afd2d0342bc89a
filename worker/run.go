package worker

import (
	"context"
	"fmt"
	"time"

	"halfmark"
	"halfmark/analysis/drift"
)

// Summary counts what an evaluation run did.
type Summary struct {
	Machines int
	Series   int
	Points   int
	Levels   [4]int // series per current level
	Findings [4]int // active findings per level (index 1–3)

	OverdueOpened, OverdueResolved int // beam-level overdue alerts
	Took                           time.Duration
}

func (s Summary) String() string {
	return fmt.Sprintf("%d machines, %d series, %d points; series level 1/2/3: %d/%d/%d; active findings level 1/2/3: %d/%d/%d; overdue alerts +%d −%d; %s",
		s.Machines, s.Series, s.Points, s.Levels[1], s.Levels[2], s.Levels[3], s.Findings[1], s.Findings[2], s.Findings[3],
		s.OverdueOpened, s.OverdueResolved, s.Took.Round(time.Millisecond))
}

// Evaluate evaluates every machine (full) or those with new checks or
// baselines since their last evaluation. A machine is evaluated whole —
// every series and every component — because a component pools the views
// of all its series (drift.EvaluateMachine), and stored in one transaction.
func (w *Worker) Evaluate(ctx context.Context, full bool) (Summary, error) {
	start := w.cfg.Now()
	var sum Summary
	ids, err := w.store.MachinesToEvaluate(ctx, !full)
	if err != nil {
		return sum, err
	}
	for _, id := range ids {
		if err := w.evaluateMachine(ctx, id, &sum); err != nil {
			return sum, err
		}
	}
	if sum.OverdueOpened, sum.OverdueResolved, err = w.store.SyncOverdueAlerts(ctx, w.cfg.Now(), w.cfg.Status); err != nil {
		return sum, err
	}
	sum.Took = w.cfg.Now().Sub(start)
	return sum, nil
}

// EvaluateMachineNow evaluates one machine at once (after a check that may
// change its level), outside the schedule.
func (w *Worker) EvaluateMachineNow(ctx context.Context, machineID int64) error {
	var sum Summary
	return w.evaluateMachine(ctx, machineID, &sum)
}

func (w *Worker) evaluateMachine(ctx context.Context, id int64, sum *Summary) error {
	w.evalMu.Lock()
	defer w.evalMu.Unlock()
	now := w.cfg.Now()
	ss, err := w.store.LoadMachineSeries(ctx, id, now)
	if err != nil {
		return err
	}
	ev, err := EvaluateMachine(id, ss, w.book.Load(), *w.detection.Load(), now)
	if err != nil {
		return fmt.Errorf("machine %d: %w", id, err)
	}
	w.penumbraCauses(ctx, &ev, ss)
	if err := w.store.RecordMachineEvaluation(ctx, &ev, w.cfg.Notifier); err != nil {
		return err
	}
	sum.Machines++
	for i := range ss {
		sum.Points += len(ss[i].ValuesMM)
	}
	for _, s := range ev.Series {
		sum.Levels[s.Evaluation.Level]++
	}
	sum.Series += len(ev.Series)
	for _, c := range ev.Components {
		if c.Active {
			sum.Findings[c.Finding.Level]++
		}
	}
	return nil
}

// EvaluateMachine runs the drift engine on one machine's series as the
// store gives them and returns what it decided, ready to store (pure: no
// I/O). It is the engine entry point the worker, the demo and the detection
// benchmark share.
func EvaluateMachine(machineID int64, ss []halfmark.SeriesData, book halfmark.ToleranceBook, det drift.Detection, now time.Time) (halfmark.MachineEvaluation, error) {
	ev := halfmark.MachineEvaluation{MachineID: machineID, At: now, ToleranceHash: book.Hash()}
	in := make([]drift.SeriesInput, len(ss))
	byID := make(map[int64]int, len(ss))
	for i := range ss {
		s := &ss[i]
		byID[s.ID] = i
		in[i] = drift.SeriesInput{ID: s.ID, MachineID: s.MachineID, BeamID: s.BeamID, MachineName: s.MachineName,
			BeamLabel: s.BeamLabel, Geometry: s.Geometry, Edge: s.Edge, Quantity: s.Quantity, Method: s.Method,
			BaselineValueMM: s.BaselineValueMM, BaselineSigmaMM: s.BaselineSigmaMM, BaselineFrom: s.BaselineFrom,
			CUSUMRestart: s.CUSUMRestart, Times: s.Times, ValuesMM: s.ValuesMM, Kinds: s.Kinds, CheckIDs: s.CheckIDs}
	}
	res, err := drift.EvaluateMachine(in, book, det, now)
	if err != nil {
		return ev, err
	}
	for _, r := range res.Series {
		i, ok := byID[r.SeriesID]
		if !ok {
			continue
		}
		s := ss[i]
		e := r.Evaluation
		e.ToleranceHash = book.Hash()
		if tr := r.Verdict.Trend; tr != nil && len(s.Times) > 0 {
			e.Trend = &halfmark.SeriesTrend{Method: tr.Method, Points: tr.Points, From: tr.From, To: s.Times[len(s.Times)-1],
				FromMM: tr.FittedFirst, ToMM: tr.FittedLast, SlopePer30dMM: tr.SlopePer30d, CILowMM: tr.CILow, CIHighMM: tr.CIHigh,
				Significant: tr.Significant}
		}
		sv := halfmark.SeriesVerdict{Series: s, Evaluation: e, BackInControl: r.Verdict.Resolved}
		for _, sg := range r.Signals {
			sv.Signals = append(sv.Signals, halfmark.SeriesSignal{Family: sg.Family, Rule: sg.Rule, Level: sg.Level,
				Message: fmt.Sprintf("%s, %s, %s %s (%s, %s): %s", s.MachineName, s.BeamLabel, s.Edge, s.Quantity, s.Geometry, s.Method, sg.Rule)})
		}
		ev.Series = append(ev.Series, sv)
	}
	for _, c := range res.Components {
		f := halfmark.Finding{MachineID: machineID, Component: c.Component, Direction: c.Direction, Level: c.Level,
			MagnitudeMM: c.MagnitudeMM, MagnitudeCIMM: c.MagnitudeCIMM, Onset: c.Onset, Crossing: c.Crossing,
			Evidence: c.Evidence, Message: c.Message, Limits: c.Limits}
		if len(ss) > 0 {
			f.Machine = ss[0].MachineName
		}
		ev.Components = append(ev.Components, halfmark.ComponentVerdict{Finding: f, Active: c.Active, BackInControl: c.BackInControl})
	}
	return ev, nil
}
