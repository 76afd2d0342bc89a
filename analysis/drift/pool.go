package drift

import (
	"math"
	"slices"
	"sort"
	"time"

	"halfmark"
)

// view is one point of one series in a component's session.
type view struct {
	series int       // index into the machine's prepared series
	at     time.Time // measurement time
	devMM  float64   // deviation from the series' baseline (or residual), mm
	sigma  float64   // σ of devMM, mm; 0: the series has no σ yet (limits only)
	level  halfmark.Level
}

// session is one calendar day (UTC) of a component.
type session struct {
	day   time.Time
	views []view
	// bank sums for MLC banks and the leaf residuals.
}

// dayOf is the session key: the UTC calendar day.
func dayOf(t time.Time) time.Time {
	y, m, d := t.UTC().Date()
	return time.Date(y, m, d, 0, 0, 0, 0, time.UTC)
}

// poolWeighted is the inverse-variance weighted mean of k views of one
// quantity (textbook result, e.g. Bevington & Robinson, Data Reduction and
// Error Analysis, 2003, eq. 4.19):
//
//	w_i = 1/σ_i²,  x̄ = Σ w_i·x_i / Σ w_i
//	Var x̄ = (Σ w_i²σ_i² + ρ·Σ_{i≠j} w_i w_j σ_i σ_j) / (Σ w_i)²
//
// which is 1/Σ(1/σ_i²) for independent views (ρ = 0). Views without σ are
// left out; ok is false when none has one.
func poolWeighted(vs []view, rho float64) (mean, se float64, n int, ok bool) {
	var W, S1, S2, sx float64
	for _, v := range vs {
		if v.sigma <= 0 {
			continue
		}
		w := 1 / (v.sigma * v.sigma)
		W += w
		sx += w * v.devMM
		S1 += w * v.sigma
		S2 += w * w * v.sigma * v.sigma
		n++
	}
	if n == 0 {
		return 0, 0, 0, false
	}
	return sx / W, math.Sqrt(S2+rho*(S1*S1-S2)) / W, n, true
}

// poolEqual is the plain mean of the views (an MLC bank's mean offset, as
// the bank-mean tolerance is defined), Var = (Σσ_i² + ρ·Σ_{i≠j}σ_iσ_j)/n².
func poolEqual(vs []view, rho float64) (mean, se float64, n int, ok bool) {
	var s1, s2, sx float64
	for _, v := range vs {
		if v.sigma <= 0 {
			continue
		}
		sx += v.devMM
		s1 += v.sigma
		s2 += v.sigma * v.sigma
		n++
	}
	if n == 0 {
		return 0, 0, 0, false
	}
	fn := float64(n)
	return sx / fn, math.Sqrt(s2+rho*(s1*s1-s2)) / fn, n, true
}

// sessionsOf groups views by day, in time order.
func sessionsOf(vs []view) []session {
	slices.SortFunc(vs, func(a, b view) int {
		if c := a.at.Compare(b.at); c != 0 {
			return c
		}
		return a.series - b.series
	})
	var out []session
	for _, v := range vs {
		d := dayOf(v.at)
		if n := len(out); n > 0 && out[n-1].day.Equal(d) {
			out[n-1].views = append(out[n-1].views, v)
			continue
		}
		out = append(out, session{day: d, views: []view{v}})
	}
	return out
}

// medianGapDays is the median gap between consecutive days; +Inf for
// fewer than two.
func medianGapDays(days []time.Time) float64 {
	if len(days) < 2 {
		return math.Inf(1)
	}
	g := make([]float64, len(days)-1)
	for i := 1; i < len(days); i++ {
		g[i-1] = days[i].Sub(days[i-1]).Hours() / 24
	}
	sort.Float64s(g)
	return g[len(g)/2]
}
