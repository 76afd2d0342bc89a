package drift

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// Cadences of a component: how often its sessions come. Family-wise widths
// are counted over the components of one cadence on one machine.
const (
	CadenceDaily   = "daily"
	CadenceMonthly = "monthly"
)

// Design is the pooled-chart design of one cadence.
type Design struct {
	// CUSUMK is the CUSUM reference value k in σ of the pooled statistic:
	// half the pooled shift the chart is tuned to (Montgomery, Introduction
	// to Statistical Quality Control, §9.1).
	CUSUMK float64 `toml:"cusum_k"`
	// FamilyARL is the target mean number of sessions between false
	// findings anywhere among the machine's components of this cadence.
	// Each component's CUSUM decision interval h and Shewhart width L are
	// derived from it and from the number m of components (familyDesign).
	FamilyARL float64 `toml:"family_arl_sessions"`
}

// Detection is a site's chart design, read from the tolerance book's
// [detection] table. DefaultDetection gives the shipped values.
type Detection struct {
	// Daily and Monthly are the designs of components whose sessions come
	// daily (morning checks) and monthly (tank scans, picket fences).
	Daily   Design `toml:"daily"`
	Monthly Design `toml:"monthly"`
	// DailyMaxGapDays: a component whose median gap between sessions is at
	// most this many days is daily, otherwise monthly.
	DailyMaxGapDays float64 `toml:"daily_max_gap_days"`

	// EWMALambda is the pooled EWMA weight λ; the chart is drawn with the
	// ARL-500 width L for λ (Lucas & Saccucci 1990). EWMAAlerts makes it
	// raise Level 1, widened for the family like the Shewhart chart (a
	// conservative width: the Bonferroni tail of one point).
	EWMALambda float64 `toml:"ewma_lambda"`
	EWMAAlerts bool    `toml:"ewma_alerts"`

	// NelsonRules must stay empty: run rules cannot be widened for a family
	// of charts by a published design, so they stay off.
	NelsonRules []int `toml:"nelson_rules"`

	// HorizonDays: a projected tolerance crossing within this many days is
	// Level 1; a later one is "beyond_horizon".
	HorizonDays float64 `toml:"horizon_days"`
	// ResolveSessions: a finding resolves after this many newest sessions
	// of its component without any flag.
	ResolveSessions int `toml:"resolve_sessions"`
	// BaselinePoints is N, the number of first points of a period that
	// estimate a missing baseline (mean and MR̄/d2).
	BaselinePoints int `toml:"baseline_points"`
	// EstimatedCorrection widens the charts of a component whose views
	// have estimated baselines so that the false-alarm rate averaged over
	// the estimation error meets the family target (estimated.go). Off:
	// charted as if the estimates were exact.
	EstimatedCorrection bool `toml:"estimated_correction"`
	// ViewCorrelation is ρ, the correlation assumed between views of one
	// component measured on the same day (pooled variance, pool.go).
	ViewCorrelation float64 `toml:"view_correlation"`
	// MinChangeFraction is the smallest change worth a finding, as a
	// fraction of the component's tolerance: the CUSUM reference value is
	// at least half of it in mm, so that a pooled chart whose views are
	// very precise does not accumulate offsets far below any clinical
	// relevance (e.g. a stored baseline a few hundredths of a mm off).
	MinChangeFraction float64 `toml:"min_change_fraction"`
	// TrendMinSessions is the fewest sessions since the onset that a trend
	// is fitted to.
	TrendMinSessions int `toml:"trend_min_sessions"`
	// ProjectionMaxRelCI: a crossing date is shown only when the half-width
	// of the 95% slope interval is at most this fraction of the slope;
	// a wider interval reports "not_significant" (no date).
	ProjectionMaxRelCI float64 `toml:"projection_max_rel_ci"`
}

// DefaultDetection returns the shipped design:
//
//   - daily: k = 1.0 (tuned to a pooled shift of 2σ: 1σ seen in four views or
//     more), family ARL 6,500 sessions ≈ 25 years of weekday sessions, so
//     about 0.04 false findings per machine-year from daily components;
//   - monthly: k = 0.5 (a 1σ shift: single leaves and light fields), family
//     ARL 300 sessions = 25 years of monthly sessions, 0.04 per year;
//   - h and L follow from the family ARL by Siegmund's approximation and the
//     Bonferroni tail (family.go); both are measured by the detection
//     benchmark (detection_test.go);
//   - EWMA λ = 0.1 charted, not alerting (its widened limits have no
//     published design; the CUSUM covers the same small shifts);
//   - Nelson rules off;
//   - horizon 365 days; resolve after 5 in-control sessions (common
//     practice);
//   - N = 20 baseline points (Montgomery §6.4 recommends 20–25 for
//     individuals), with the charts widened for the estimation error
//     (estimated.go);
//   - smallest change worth a finding 5% of the tolerance (0.1 mm for a
//     2 mm jaw tolerance: the 1σ-per-view shift the daily design is tuned
//     to; common practice for an indifference zone, local choice of value);
//   - views independent (ρ = 0): each view is a separate exposure or
//     reading in its own check; a site that sees shared daily error sets ρ;
//   - trend on at least 5 sessions since the onset; a date only when the
//     slope is known to ±20% (95% interval): with a looser gate the first
//     date shown for drifts of 0.01–0.03 mm/day falls outside ±20% of the
//     true crossing too often (measured by the detection benchmark: 62% within
//     ±20% at 0.02 mm/day with ±35%, 85% with ±20%).
func DefaultDetection() Detection {
	return Detection{
		Daily:               Design{CUSUMK: 1.0, FamilyARL: 6500},
		Monthly:             Design{CUSUMK: 0.5, FamilyARL: 300},
		DailyMaxGapDays:     4,
		EWMALambda:          0.1,
		HorizonDays:         365,
		ResolveSessions:     5,
		BaselinePoints:      20,
		EstimatedCorrection: true,
		MinChangeFraction:   0.05,
		TrendMinSessions:    5,
		ProjectionMaxRelCI:  0.2,
	}
}

// Validate checks a design; errors name the [detection] key to fix.
func (d Detection) Validate() error {
	var errs []error
	bad := func(key string, v float64, want string) {
		errs = append(errs, fmt.Errorf("detection.%s = %v: %s", key, v, want))
	}
	for _, c := range []struct {
		name string
		d    Design
	}{{"daily", d.Daily}, {"monthly", d.Monthly}} {
		if !(c.d.CUSUMK > 0 && c.d.CUSUMK <= 3) {
			bad(c.name+".cusum_k", c.d.CUSUMK, "must be in (0, 3] σ (half the pooled shift to detect; 0.5 to 1 are usual)")
		}
		if !(c.d.FamilyARL >= 10) || math.IsInf(c.d.FamilyARL, 0) {
			bad(c.name+".family_arl_sessions", c.d.FamilyARL, "must be at least 10 sessions (the mean run between false findings of the whole family)")
		}
	}
	if !(d.DailyMaxGapDays >= 1 && d.DailyMaxGapDays <= 14) {
		bad("daily_max_gap_days", d.DailyMaxGapDays, "must be 1 to 14 days")
	}
	if _, ok := ewmaDesignL(d.EWMALambda); !ok {
		bad("ewma_lambda", d.EWMALambda, "must be one of 0.05, 0.1, 0.2, 0.25, 0.4 (the tabulated ARL-500 designs)")
	}
	if len(d.NelsonRules) > 0 {
		errs = append(errs, errors.New("detection.nelson_rules: run rules stay off (no published widening for a family of charts); remove the key"))
	}
	if !(d.HorizonDays >= 1 && d.HorizonDays <= 3650) {
		bad("horizon_days", d.HorizonDays, "must be 1 to 3650 days")
	}
	if d.ResolveSessions < 1 || d.ResolveSessions > 100 {
		bad("resolve_sessions", float64(d.ResolveSessions), "must be 1 to 100 sessions")
	}
	if d.BaselinePoints < 5 || d.BaselinePoints > 500 {
		bad("baseline_points", float64(d.BaselinePoints), "must be 5 to 500 points (20 recommended)")
	}
	if !(d.ViewCorrelation >= 0 && d.ViewCorrelation < 1) {
		bad("view_correlation", d.ViewCorrelation, "must be in [0, 1)")
	}
	if !(d.MinChangeFraction >= 0 && d.MinChangeFraction <= 0.5) {
		bad("min_change_fraction", d.MinChangeFraction, "must be 0 to 0.5 of the tolerance (0: no floor)")
	}
	if d.TrendMinSessions < 5 || d.TrendMinSessions > 1000 {
		bad("trend_min_sessions", float64(d.TrendMinSessions), "must be 5 to 1000 sessions (Sen's interval needs 6 points at 95%)")
	}
	if !(d.ProjectionMaxRelCI > 0 && d.ProjectionMaxRelCI <= 1) {
		bad("projection_max_rel_ci", d.ProjectionMaxRelCI, "must be in (0, 1]")
	}
	return errors.Join(errs...)
}

func (d Detection) design(cadence string) Design {
	if cadence == CadenceDaily {
		return d.Daily
	}
	return d.Monthly
}

// familyDesign is the per-component design for a family of m components
// with target family ARL A (sessions). The false-alarm budget is split
// evenly between the charts that alert (Shewhart and CUSUM, and EWMA when
// it alerts), so each chart's two-sided in-control ARL per component is
//
//	A_c = c · m · A          c = number of alerting charts
//	L   = Φ⁻¹(1 − 1/(2·A_c))                      (Bonferroni tail per session)
//	h:  ARL₀⁺(k, h) = 2·A_c,  ARL₀⁺ ≈ (e^{2kb} − 2kb − 1)/(2k²), b = h + 1.166
//
// (Siegmund, Sequential Analysis, 1985, as given by Montgomery §9.1 — from
// memory; the two-sided ARL of two one-sided charts is about half the
// one-sided one for k > 0).
type chartDesign struct {
	K, H, L, EWMAL float64
	Components     int
	AC             float64 // per-chart two-sided in-control ARL target, sessions
	minChangeMM    float64 // smallest change worth a finding, mm (0: none)
}

func (d Detection) familyDesign(cadence string, m int) chartDesign {
	ds := d.design(cadence)
	m = max(m, 1)
	c := 2.0
	if d.EWMAAlerts {
		c = 3
	}
	ac := c * float64(m) * ds.FamilyARL
	cd := chartDesign{K: ds.CUSUMK, Components: m, AC: ac}
	cd.L = distuv.UnitNormal.Quantile(1 - 1/(2*ac))
	cd.H = siegmundH(ds.CUSUMK, 2*ac)
	cd.EWMAL, _ = ewmaDesignL(d.EWMALambda)
	if d.EWMAAlerts {
		cd.EWMAL = cd.L
	}
	return cd
}

// siegmundH solves ARL₀⁺(k, h) = want for h by bisection.
func siegmundH(k, want float64) float64 {
	lo, hi := 0.0, 60.0
	for range 80 {
		mid := (lo + hi) / 2
		if siegmundARL(k, mid) < want {
			lo = mid
		} else {
			hi = mid
		}
	}
	return (lo + hi) / 2
}

// SiegmundARL1 is Siegmund's approximation of the one-sided CUSUM ARL at
// a shift of δ (σ) for design (k, h): with Δ = δ − k, b = h + 1.166,
//
//	ARL ≈ (e^{−2Δb} + 2Δb − 1)/(2Δ²)   (Δ ≠ 0),   b²  (Δ = 0)
//
// (Siegmund 1985, via Montgomery §9.1 — from memory).
func SiegmundARL1(k, h, delta float64) float64 {
	dd := delta - k
	b := h + 1.166
	if math.Abs(dd) < 1e-9 {
		return b * b
	}
	return (math.Exp(-2*dd*b) + 2*dd*b - 1) / (2 * dd * dd)
}

func ewmaDesignL(lambda float64) (float64, bool) {
	for _, p := range [...][2]float64{{0.05, 2.615}, {0.10, 2.814}, {0.20, 2.962}, {0.25, 2.998}, {0.40, 3.054}} {
		if math.Abs(p[0]-lambda) < 1e-12 {
			return p[1], true
		}
	}
	return 0, false
}
