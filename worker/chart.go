package worker

import (
	"context"
	"time"

	"halfmark"
	"halfmark/analysis/drift"
)

// SeriesChart is the chart document of one series: its identity, the
// baseline in force, the limits and where they come from, and the verdict
// with every point's statistics.
type SeriesChart struct {
	Series   halfmark.Series  `json:"series"`
	Machine  string           `json:"machine"`
	Beam     string           `json:"beam"`
	Baseline chartBaseline    `json:"baseline"`
	Limits   *halfmark.Limits `json:"limits"`
	Kind     string           `json:"kind"`
	Verdict  drift.Verdict    `json:"verdict"`
	Hash     string           `json:"tolerance_hash"`
	Shipped  bool             `json:"shipped_tolerances"`
	Error    string           `json:"error,omitempty"`
}

type chartBaseline struct {
	ValueMM   *float64   `json:"value_mm"` // as set; nil when estimated
	SigmaMM   *float64   `json:"sigma_mm"`
	ValidFrom *time.Time `json:"valid_from"`
}

// SeriesChart evaluates one series now and returns its chart; ENotFound
// when the series does not exist.
func (w *Worker) SeriesChart(ctx context.Context, id int64) (SeriesChart, error) {
	now := w.cfg.Now()
	ss, err := w.db.LoadEvalSeries(ctx, []int64{id}, now)
	if err != nil {
		return SeriesChart{}, err
	}
	if len(ss) == 0 {
		return SeriesChart{}, halfmark.Errorf(halfmark.ENotFound, "series %d does not exist", id)
	}
	s := &ss[0]
	book := w.book.Load()
	o := w.cfg.Drift
	o.Now = now
	v, lim, det := EvaluateSeries(s, book, o)
	ser := s.Series
	ser.Points = len(s.ValuesMM)
	return SeriesChart{Series: ser, Machine: s.MachineName, Beam: s.BeamLabel,
		Baseline: chartBaseline{s.BaselineValueMM, s.BaselineSigmaMM, s.BaselineFrom},
		Limits:   lim, Kind: string(det.Kind), Verdict: v, Hash: book.Hash(), Shipped: book.IsShippedExample(), Error: det.Error}, nil
}

// Chart is SeriesChart for the API (api.ChartService).
func (w *Worker) Chart(ctx context.Context, id int64) (any, error) {
	ch, err := w.SeriesChart(ctx, id)
	if err != nil {
		return nil, err
	}
	return ch, nil
}
