package drift

import (
	"fmt"
	"time"

	"halfmark/analysis/spc"
)

// Defaults of Options.
const (
	DefaultBaselinePoints = spc.DefaultBaselinePoints // N points that estimate a missing baseline
	DefaultHorizon        = 30 * 24 * time.Hour       // a projected crossing nearer than this is Level 1
	// DefaultTrendWindow is how many of the newest points the trend uses.
	// 60 points is two months of daily checks: long enough to see a drift
	// of 0.05 mm/day against 0.1 mm noise, and it keeps the Theil–Sen cost
	// at 1,770 slopes instead of 124,750 for 500 points.
	DefaultTrendWindow = 60
	// MinTrendPoints is the fewest points a trend is fitted to; fewer give
	// no Theil–Sen interval worth reporting (common practice).
	MinTrendPoints = 10
	// DefaultInControlPoints is M: an alert resolves itself after this many
	// newest points without any signal.
	DefaultInControlPoints = 5
)

// DefaultNelsonRules are the run rules that raise Level 1 unless
// Options.NelsonRules says otherwise: none. On top of the Shewhart, EWMA
// and CUSUM charts each rule shortens the in-control run length (by
// simulation in the tests, for independent N(0, 1) points: about 195
// points between false Level-1 signals with no rule, 145 with rule 2, 134
// with rule 3, 109 with both), while EWMA and CUSUM already see the slow
// drifts the rules would. Select rules (e.g. []int{2, 3}) to add them.
var DefaultNelsonRules = []int{}

// Options are the chart designs and the evaluation clock. The zero value
// takes every default except Now, which the caller must set.
type Options struct {
	BaselinePoints int // N for an estimated baseline; 0 means 20
	// FullBaseline keeps an estimated baseline pending until the period
	// has BaselinePoints points (false: from spc.MinBaselinePoints on).
	FullBaseline bool

	// EWMA design: λ and L in sigma. Zero λ means 0.1 and zero L the
	// ARL-500 width for λ (Lucas & Saccucci 1990; spc.EWMADesignL).
	EWMALambda, EWMAL float64
	// CUSUM design in sigma: k (zero means 0.5) and h (zero means 5),
	// in-control ARL ≈ 465 (Montgomery, Table 9.3).
	CUSUMK, CUSUMH float64

	// NelsonRules selects rules 1..8 checked on the values in measurement
	// order; nil means DefaultNelsonRules (none) and an empty non-nil slice
	// none.
	NelsonRules []int

	TrendMethod spc.TrendMethod // spc.TheilSen (default) or spc.OLS
	TrendWindow int             // newest points used by the trend; 0 means 60
	Horizon     time.Duration   // 0 means 30 days

	InControlPoints int // M; 0 means 5

	// FamilySize is the number of series charted together (e.g. every
	// series of a machine); above 1 the statistical designs are widened to
	// keep the family's false-alarm rate near one series' (family.go).
	FamilySize int

	// Now is the evaluation time; projected crossings are compared with
	// Now + Horizon.
	Now time.Time
}

func (o Options) withDefaults() (Options, error) {
	if o.BaselinePoints == 0 {
		o.BaselinePoints = DefaultBaselinePoints
	}
	if o.BaselinePoints < spc.MinBaselinePoints {
		return o, fmt.Errorf("drift: baseline points %d is too few; use at least %d (20 recommended)", o.BaselinePoints, spc.MinBaselinePoints)
	}
	if o.NelsonRules == nil {
		o.NelsonRules = DefaultNelsonRules
	}
	for _, r := range o.NelsonRules {
		if r < 1 || r > 8 {
			return o, fmt.Errorf("drift: Nelson rule %d does not exist; rules are numbered 1 to 8", r)
		}
	}
	if o.TrendWindow == 0 {
		o.TrendWindow = DefaultTrendWindow
	}
	if o.TrendWindow < MinTrendPoints {
		return o, fmt.Errorf("drift: trend window %d is too short; use at least %d points", o.TrendWindow, MinTrendPoints)
	}
	if o.Horizon == 0 {
		o.Horizon = DefaultHorizon
	}
	if o.Horizon < 0 {
		return o, fmt.Errorf("drift: horizon %v must be positive, e.g. 720h for 30 days", o.Horizon)
	}
	if o.InControlPoints == 0 {
		o.InControlPoints = DefaultInControlPoints
	}
	if o.Now.IsZero() {
		return o, fmt.Errorf("drift: Options.Now is required (the evaluation time)")
	}
	return o, nil
}
