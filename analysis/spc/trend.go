package spc

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"time"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"
)

// TrendMethod selects the slope estimator.
type TrendMethod string

const (
	// TheilSen is the median of pairwise slopes with Sen's (1968)
	// distribution-free interval; robust to a few outliers.
	TheilSen TrendMethod = "theil-sen"
	// OLS is the least-squares line with a Student-t interval.
	OLS TrendMethod = "ols"
)

// TrendOptions configures Trend.
type TrendOptions struct {
	Method     TrendMethod // TheilSen (default) or OLS
	Confidence float64     // two-sided interval level; zero means 0.95
}

// TrendResult is a straight-line drift estimate. Slopes are in the unit of
// the values (mm, %) per day or per 30 days; x is in days from Origin.
type TrendResult struct {
	Method     TrendMethod
	N          int     // points used
	Confidence float64 // interval level, e.g. 0.95

	SlopePerDay float64 // fitted slope, unit per day
	Intercept   float64 // fitted value at day 0
	SlopePer30d float64 // 30·SlopePerDay
	CILow       float64 // lower confidence limit of the slope, per 30 days
	CIHigh      float64 // upper confidence limit of the slope, per 30 days
	// Significant is true when the interval excludes zero.
	Significant bool
	// Origin is day 0 for TrendTimes (the earliest time); zero for Trend.
	Origin time.Time
}

// ValueAt returns the fitted value at day (days from Origin).
func (t TrendResult) ValueAt(day float64) float64 { return t.Intercept + t.SlopePerDay*day }

// Day converts a time to days from Origin.
func (t TrendResult) Day(at time.Time) float64 { return at.Sub(t.Origin).Hours() / 24 }

const daysPer30 = 30

// TrendTimes fits a trend against measurement times; irregular spacing is
// handled because x is the elapsed time in days from the earliest time.
// See Trend.
func TrendTimes(t []time.Time, y []float64, o TrendOptions) (TrendResult, error) {
	if len(t) != len(y) {
		return TrendResult{}, fmt.Errorf("spc: %d times but %d values; give one time per value", len(t), len(y))
	}
	if len(t) == 0 {
		return TrendResult{}, errors.New("spc: trend needs values")
	}
	origin := t[0]
	for _, ti := range t[1:] {
		if ti.Before(origin) {
			origin = ti
		}
	}
	days := make([]float64, len(t))
	for i, ti := range t {
		days[i] = ti.Sub(origin).Hours() / 24
	}
	r, err := Trend(days, y, o)
	r.Origin = origin
	return r, err
}

// Trend fits y (unit of the values) against days and reports the slope per
// 30 days with a two-sided confidence interval. The trend is significant when
// the interval excludes zero.
//
// Theil–Sen (Theil 1950; Sen, JASA 63, 1968):
//
//	b = median over i<j, x_i≠x_j of (y_j − y_i)/(x_j − x_i);  a = median(y_i − b·x_i)
//	C = z_(1−α/2)·sqrt(Var S), Var S = Kendall's S variance with tie corrections
//	M1 = (N' − C)/2, M2 = (N' + C)/2 (N' = number of slopes)
//	interval = [M1-th, (M2+1)-th smallest slope], interpolated between ranks
//
// (Gilbert, Statistical Methods for Environmental Pollution Monitoring, 1987,
// §16.5; Kendall & Gibbons, Rank Correlation Methods, 1990, for Var S). It
// needs enough points for the interval ranks to exist (n ≥ 6 at 95 %).
//
// OLS: b = Sxy/Sxx (gonum stat.LinearRegression), s² = SSE/(n − 2),
// se(b) = s/sqrt(Sxx), interval b ± t_(n−2, 1−α/2)·se(b) (Draper & Smith,
// Applied Regression Analysis, §1.4). It needs n ≥ 3.
func Trend(days, y []float64, o TrendOptions) (TrendResult, error) {
	r := TrendResult{Method: o.Method, Confidence: o.Confidence, N: len(y)}
	if r.Method == "" {
		r.Method = TheilSen
	}
	if r.Confidence == 0 {
		r.Confidence = 0.95
	}
	if !(r.Confidence > 0 && r.Confidence < 1) {
		return r, fmt.Errorf("spc: confidence %v must be between 0 and 1, e.g. 0.95", o.Confidence)
	}
	if len(days) != len(y) {
		return r, fmt.Errorf("spc: %d days but %d values; give one day per value", len(days), len(y))
	}
	if len(y) < 3 {
		return r, fmt.Errorf("spc: a trend needs at least 3 points, got %d", len(y))
	}
	if err := checkFinite("day", days); err != nil {
		return r, err
	}
	if err := checkFinite("value", y); err != nil {
		return r, err
	}
	if slices.Min(days) == slices.Max(days) {
		return r, errors.New("spc: all points are at the same time; a trend needs measurements on at least two days")
	}
	var lo, hi float64
	var err error
	switch r.Method {
	case TheilSen:
		r.SlopePerDay, r.Intercept, lo, hi, err = theilSen(days, y, r.Confidence)
	case OLS:
		r.SlopePerDay, r.Intercept, lo, hi, err = ols(days, y, r.Confidence)
	default:
		return r, fmt.Errorf("spc: trend method %q unknown; use %q or %q", o.Method, TheilSen, OLS)
	}
	if err != nil {
		return r, err
	}
	r.SlopePer30d = daysPer30 * r.SlopePerDay
	r.CILow, r.CIHigh = daysPer30*lo, daysPer30*hi
	r.Significant = lo > 0 || hi < 0
	return r, nil
}

func theilSen(x, y []float64, conf float64) (b, a, lo, hi float64, err error) {
	n := len(x)
	slopes := make([]float64, 0, n*(n-1)/2)
	for i := range n {
		for j := i + 1; j < n; j++ {
			if dx := x[j] - x[i]; dx != 0 {
				slopes = append(slopes, (y[j]-y[i])/dx)
			}
		}
	}
	nn := float64(len(slopes))
	c := distuv.UnitNormal.Quantile(1-(1-conf)/2) * math.Sqrt(kendallVarS(x, y))
	m1, m2 := (nn-c)/2, (nn+c)/2+1
	if m1 < 1 || m2 > nn {
		return 0, 0, 0, 0, fmt.Errorf("spc: %d points are too few for a %.0f%% Theil–Sen interval; add points, lower the confidence or use OLS", n, 100*conf)
	}
	// Selection instead of a full sort: O(N) expected for the N ≈ n²/2
	// slopes. The ranks are ascending, m1 ≤ (N+1)/2 ≤ m2.
	var v [3]float64
	selectRanks(slopes, []float64{m1, (nn + 1) / 2, m2}, v[:])
	lo, b, hi = v[0], v[1], v[2]

	resid := slopes[:n] // reuse the buffer: cap n(n−1)/2 ≥ n for n ≥ 3
	for i := range n {
		resid[i] = y[i] - b*x[i]
	}
	slices.Sort(resid)
	a = rankValue(resid, float64(n+1)/2)
	return b, a, lo, hi, nil
}

// rankValue returns the value of fractional 1-based rank r in sorted s,
// interpolating linearly between neighbouring ranks.
func rankValue(s []float64, r float64) float64 {
	i := int(math.Floor(r))
	f := r - float64(i)
	if f == 0 || i >= len(s) {
		return s[i-1]
	}
	return s[i-1] + f*(s[i]-s[i-1])
}

// selectRanks stores in dst the values of the ascending fractional 1-based
// ranks of s (as rankValue would on sorted s), partially reordering s.
func selectRanks(s []float64, ranks, dst []float64) {
	state := uint64(0x9e3779b97f4a7c15) // fixed seed: results are deterministic
	lo := 0
	for j, r := range ranks {
		i := int(math.Floor(r)) - 1 // 0-based index of rank floor(r)
		nthElement(s[lo:], i-lo, &state)
		dst[j] = s[i]
		if f := r - math.Floor(r); f > 0 && i+1 < len(s) {
			dst[j] += f * (slices.Min(s[i+1:]) - s[i])
		}
		lo = i
	}
}

// nthElement reorders s so that s[k] holds the value a sort would put there,
// with no larger value before it and no smaller one after (Hoare's FIND,
// CACM 4(7), 1961, with a three-way partition around a pseudo-random pivot so
// runs of equal slopes stay linear).
func nthElement(s []float64, k int, state *uint64) {
	for len(s) > 1 {
		*state ^= *state << 13 // xorshift64 (Marsaglia 2003)
		*state ^= *state >> 7
		*state ^= *state << 17
		p := s[*state%uint64(len(s))]
		lt, i, gt := 0, 0, len(s)
		for i < gt {
			switch {
			case s[i] < p:
				s[lt], s[i] = s[i], s[lt]
				lt++
				i++
			case s[i] > p:
				gt--
				s[i], s[gt] = s[gt], s[i]
			default:
				i++
			}
		}
		switch {
		case k < lt:
			s = s[:lt]
		case k >= gt:
			s, k = s[gt:], k-gt
		default:
			return
		}
	}
}

// kendallVarS returns the variance of Kendall's S between x and y under
// independence, with ties in both (Kendall & Gibbons 1990, eq. 4.4):
//
//	[v0 − vt − vu]/18 + t2·u2/(9n(n−1)(n−2)) + t1·u1/(2n(n−1))
//
// v0 = n(n−1)(2n+5), vt = Σ t(t−1)(2t+5), t1 = Σ t(t−1), t2 = Σ t(t−1)(t−2)
// over groups of t tied x values (u likewise for y).
func kendallVarS(x, y []float64) float64 {
	n := float64(len(x))
	tv, t1, t2 := tieSums(x)
	uv, u1, u2 := tieSums(y)
	v := (n*(n-1)*(2*n+5) - tv - uv) / 18
	if n > 2 {
		v += t2 * u2 / (9 * n * (n - 1) * (n - 2))
	}
	return v + t1*u1/(2*n*(n-1))
}

func tieSums(x []float64) (v, s1, s2 float64) {
	s := slices.Clone(x)
	slices.Sort(s)
	for i := 0; i < len(s); {
		j := i + 1
		for j < len(s) && s[j] == s[i] {
			j++
		}
		if t := float64(j - i); t > 1 {
			v += t * (t - 1) * (2*t + 5)
			s1 += t * (t - 1)
			s2 += t * (t - 1) * (t - 2)
		}
		i = j
	}
	return v, s1, s2
}

func ols(x, y []float64, conf float64) (b, a, lo, hi float64, err error) {
	a, b = stat.LinearRegression(x, y, nil, false)
	mx := mean(x)
	var sxx, sse float64
	for i := range x {
		d := x[i] - mx
		sxx += d * d
		e := y[i] - (a + b*x[i])
		sse += e * e
	}
	df := float64(len(x) - 2)
	se := math.Sqrt(sse / df / sxx)
	t := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: df}.Quantile(1 - (1-conf)/2)
	return b, a, b - t*se, b + t*se, nil
}

// maxProjectionDays bounds projections so a nearly flat trend does not
// overflow time.Duration; crossings further away are reported as none.
const maxProjectionDays = 200 * 365.25

// ProjectCrossingDay returns the day (days from the trend's origin) at which
// the fitted line a + b·day reaches limit, provided the trend is significant
// and the line, at fromDay, is on the inside of the limit and heading
// towards it:
//
//	day = (limit − a)/b,  reported when day ≥ fromDay
//
// An upper limit (above the fitted value) needs a rising line, a lower limit
// a falling one. ok is false when the trend is not significant, the line moves
// away from the limit, it is already past the limit at fromDay, or the
// crossing is more than 200 years away.
func ProjectCrossingDay(tr TrendResult, fromDay, limit float64) (day float64, ok bool) {
	b := tr.SlopePerDay
	if !tr.Significant || b == 0 || !isFinite(limit) || !isFinite(fromDay) {
		return 0, false
	}
	day = (limit - tr.Intercept) / b
	if day < fromDay || day-fromDay > maxProjectionDays {
		return 0, false
	}
	return day, true
}

// ProjectCrossing is ProjectCrossingDay for a trend built by TrendTimes: it
// returns the projected time at which the fitted line reaches limit (upper or
// lower), looking forward from `from`, or nil when the line is not
// approaching the limit (see ProjectCrossingDay).
func ProjectCrossing(tr TrendResult, from time.Time, limit float64) *time.Time {
	day, ok := ProjectCrossingDay(tr, tr.Day(from), limit)
	if !ok {
		return nil
	}
	at := tr.Origin.Add(time.Duration(day * float64(24*time.Hour)))
	return &at
}
