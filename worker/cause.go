package worker

import (
	"context"
	"time"

	"halfmark"
	"halfmark/analysis/penumbra"
)

// penumbraCauses adds the likely cause to each active penumbra finding:
// the beam's penumbra model (analysis/penumbra: a Gaussian source projected
// by each collimator's magnification, in quadrature with a radiological
// part) is fitted on the points before the finding's onset and the change
// since then is classified as source, radiological, setup or undetermined
// (penumbra.Classify). A beam whose data cannot separate the parts gets
// "undetermined" with the model's reason.
func (w *Worker) penumbraCauses(ctx context.Context, ev *halfmark.MachineEvaluation, ss []halfmark.SeriesData) {
	if w.cfg.Penumbra == nil {
		return
	}
	byID := make(map[int64]*halfmark.SeriesData, len(ss))
	for i := range ss {
		byID[ss[i].ID] = &ss[i]
	}
	for i := range ev.Components {
		c := &ev.Components[i]
		f := &c.Finding
		if !c.Active || f.Kind != halfmark.ComponentPenumbra || f.Onset == nil {
			continue
		}
		var beamID int64
		votes := map[halfmark.Method]int{}
		for _, e := range f.Evidence {
			if s := byID[e.SeriesID]; s != nil {
				beamID = s.BeamID
				votes[s.Method]++
			}
		}
		if beamID == 0 {
			continue
		}
		method, best := halfmark.MethodScan, 0
		for m, n := range votes {
			if n > best || (n == best && m < method) {
				method, best = m, n
			}
		}
		cause, msg := w.classify(ctx, beamID, method, *f.Onset)
		f.Cause = &cause
		if msg != "" {
			f.Message += " Likely cause: " + msg
		}
	}
}

func (w *Worker) classify(ctx context.Context, beamID int64, method halfmark.Method, onset time.Time) (halfmark.PenumbraCause, string) {
	und := halfmark.PenumbraCause{Kind: penumbra.CauseUndetermined}
	model, _, err := penumbra.LoadModel(ctx, w.cfg.Penumbra, beamID, method, onset)
	if err != nil {
		return und, "undetermined (the baseline penumbra model cannot be fitted: " + err.Error() + ")"
	}
	after, err := w.cfg.Penumbra.PenumbraPoints(ctx, beamID, method, onset, time.Time{})
	if err != nil {
		return und, "undetermined (" + err.Error() + ")"
	}
	apts, _, err := penumbra.FromSet(after)
	if err != nil {
		return und, "undetermined (" + err.Error() + ")"
	}
	cause, msg, err := penumbra.Classify(model, apts)
	if err != nil {
		return und, "undetermined (" + err.Error() + ")"
	}
	return cause, msg
}
