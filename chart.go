package halfmark

import (
	"context"
	"time"
)

// ChartPoint is one point of a series chart as the drift engine judged it.
// Statistics are absent while the baseline is pending (no sigma yet).
type ChartPoint struct {
	Index       int       `json:"index"` // 1-based within the baseline period
	Time        time.Time `json:"time"`
	ValueMM     float64   `json:"value_mm"`
	DeviationMM float64   `json:"deviation_mm"`
	EWMA        *float64  `json:"ewma,omitempty"`
	EWMAUCL     *float64  `json:"ewma_ucl,omitempty"`
	EWMALCL     *float64  `json:"ewma_lcl,omitempty"`
	CPlus       *float64  `json:"cusum_plus,omitempty"`
	CMinus      *float64  `json:"cusum_minus,omitempty"`
	Flags       uint8     `json:"-"`
	Signals     []string  `json:"signals,omitempty"` // rule families flagged on this point
	CheckID     string    `json:"check_id,omitempty"`
	Kind        CheckKind `json:"kind,omitempty"`
}

// SeriesChart is what every screen draws for a series: the engine's
// centre, limits and per-point statistics. Limits are absolute values, mm.
type SeriesChart struct {
	Centre         float64      `json:"centre_mm"`
	Sigma          *float64     `json:"sigma_mm"`
	UCL            *float64     `json:"ucl_mm"` // individuals chart, centre ± L·σ
	LCL            *float64     `json:"lcl_mm"`
	ToleranceUpper *float64     `json:"tolerance_upper_mm"`
	ToleranceLower *float64     `json:"tolerance_lower_mm"`
	ActionUpper    *float64     `json:"action_upper_mm"`
	ActionLower    *float64     `json:"action_lower_mm"`
	CUSUMInterval  *float64     `json:"cusum_h_mm"` // H·σ
	EWMALambda     float64      `json:"ewma_lambda,omitempty"`
	EWMAL          float64      `json:"ewma_l,omitempty"`
	Points         []ChartPoint `json:"points"`
}

// Verdict words: what was checked and what it found. "in_control" is said
// only where the control-chart tests ran and passed; "within_tolerance"
// where only the limits could be checked.
const (
	VerdictInControl       = "in_control"
	VerdictWithinTolerance = "within_tolerance"
	VerdictBaselinePending = "baseline_pending"
	VerdictSignal          = "signal" // Level 1 or above
	VerdictNotEvaluated    = "not_evaluated"
)

// SeriesEvaluation is the drift engine's stored judgement of one series:
// every page, report and API answer reads it and never judges again.
type SeriesEvaluation struct {
	SeriesID    int64     `json:"series_id"`
	EvaluatedAt time.Time `json:"evaluated_at"`
	Level       Level     `json:"level"`
	Verdict     string    `json:"verdict"` // one of the Verdict* words
	Rule        string    `json:"rule"`
	Rules       []string  `json:"rules"` // families firing on the newest point
	Kind        CheckKind `json:"kind"`  // kind of the newest point (chooses the limits)
	Method      Method    `json:"method"`
	Asymmetric  bool      `json:"asymmetric"`
	Limits      *Limits   `json:"limits"`
	BaselineMM  float64   `json:"baseline_mm"`
	// BaselineEstimated: the centre or σ came from the period's first points.
	BaselineEstimated bool            `json:"baseline_estimated"`
	DeviationMM       *float64        `json:"deviation_mm"`
	Crossing          FindingCrossing `json:"crossing"`
	Trend             *SeriesTrend    `json:"trend,omitempty"`
	FindingIDs        []int64         `json:"finding_ids"` // active findings this series is evidence of
	ToleranceHash     string          `json:"tolerance_hash"`
	Chart             SeriesChart     `json:"chart"`
}

// SeriesTrend is the drift line the engine fitted to a series (Theil–Sen
// with Sen's 95% slope interval, Sen 1968), for drawing: the line runs from
// (From, FromMM) to (To, ToMM).
type SeriesTrend struct {
	Method        string    `json:"method"`
	Points        int       `json:"points"`
	From          time.Time `json:"from"`
	To            time.Time `json:"to"`
	FromMM        float64   `json:"from_mm"`
	ToMM          float64   `json:"to_mm"`
	SlopePer30dMM float64   `json:"slope_per_30d_mm"`
	CILowMM       float64   `json:"ci_low_per_30d_mm"`
	CIHighMM      float64   `json:"ci_high_per_30d_mm"`
	Significant   bool      `json:"significant"`
}

// EvaluationService reads what the drift engine stored.
type EvaluationService interface {
	// SeriesEvaluation returns the newest stored evaluation of a series with
	// its chart; ENotFound when the series has not been evaluated yet.
	SeriesEvaluation(ctx context.Context, seriesID int64) (SeriesEvaluation, error)
}
