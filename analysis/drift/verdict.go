package drift

import (
	"time"

	"halfmark"
)

// Rule families: one open alert per series and family.
const (
	FamilyLimit    = "limit"    // beyond tolerance (Level 2) or action limit (Level 3)
	FamilyShewhart = "shewhart" // individuals value beyond centre ± 3σ
	FamilyEWMA     = "ewma"
	FamilyCUSUM    = "cusum"
	FamilyNelson   = "nelson"
	FamilyTrend    = "trend"
)

// Signal is one family firing on the newest point (or, for the trend, on
// the series as a whole).
type Signal struct {
	Family string         `json:"family"`
	Rule   string         `json:"rule"`
	Level  halfmark.Level `json:"level"`
}

// Crossing is where the fitted trend line reaches a limit.
type Crossing struct {
	At    time.Time `json:"at"`
	Limit string    `json:"limit"` // "tolerance" or "action"
	Side  string    `json:"side"`  // "upper" or "lower"
	MM    float64   `json:"mm"`    // the limit's value, mm
}

// TrendSummary is the drift estimate over the trend window.
type TrendSummary struct {
	Method      string    `json:"method"`
	Points      int       `json:"points"`
	SlopePer30d float64   `json:"slope_per_30d_mm"`
	CILow       float64   `json:"ci_low_mm"` // per 30 days
	CIHigh      float64   `json:"ci_high_mm"`
	Significant bool      `json:"significant"`
	FittedFirst float64   `json:"fitted_first_mm"` // line at the window's first point
	FittedLast  float64   `json:"fitted_last_mm"`  // line at the newest point
	From        time.Time `json:"from"`
	Tolerance   *Crossing `json:"tolerance_crossing,omitempty"`
	Action      *Crossing `json:"action_crossing,omitempty"`
}

// Flags of a chart point (bit set).
const (
	FlagLimit    = 1 << iota // beyond tolerance
	FlagShewhart             // beyond centre ± 3σ
	FlagEWMA                 // EWMA statistic beyond its limit
	FlagCUSUM                // C+ or C− above H
	FlagNelson               // a selected Nelson rule completes here
)

// ChartPoint and Chart are the root package's chart types: one name for
// the chart every screen draws.
type (
	ChartPoint = halfmark.ChartPoint
	Chart      = halfmark.SeriesChart
)

// Verdict is the evaluation of one series at Options.Now.
type Verdict struct {
	Level   halfmark.Level `json:"level"`
	Family  string         `json:"family,omitempty"` // of the rule that set Level
	Rule    string         `json:"rule,omitempty"`
	Signals []Signal       `json:"signals,omitempty"` // every family firing now

	N               int        `json:"n"` // points in the baseline period
	BaselineMM      float64    `json:"baseline_mm"`
	SigmaMM         *float64   `json:"sigma_mm"`
	BaselineDerived bool       `json:"baseline_estimated"` // value or sigma from the first N points
	BaselinePending bool       `json:"baseline_pending"`   // too few points to estimate it yet
	LastAt          *time.Time `json:"last_at"`
	LastMM          float64    `json:"last_mm"`
	DeviationMM     *float64   `json:"deviation_mm"` // newest value − baseline
	ToleranceMM     float64    `json:"tolerance_mm"`
	ActionMM        float64    `json:"action_mm"`

	// Projected is the earliest projected crossing (tolerance or action)
	// after the newest point, nil when the trend is not significant or
	// moves away from both limits.
	Projected *Crossing     `json:"projected_crossing"`
	Trend     *TrendSummary `json:"trend,omitempty"`

	// InControlRun counts the newest points in a row without any flag;
	// Resolved is true when it reaches Options.InControlPoints and the
	// level is 0.
	InControlRun int  `json:"in_control_run"`
	Resolved     bool `json:"back_in_control"`

	Chart Chart `json:"chart"`
}
