package spc

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat"
)

// An exact line must be recovered exactly by both estimators, with a
// zero-width interval, on irregular spacing (analytic).
func TestTrendExactLine(t *testing.T) {
	days := []float64{0, 3, 7.5, 11, 30, 31, 60, 61.25}
	y := make([]float64, len(days))
	for i, d := range days {
		y[i] = 1.2 + 0.01*d // mm; 0.3 mm per 30 days
	}
	for _, m := range []TrendMethod{TheilSen, OLS} {
		r, err := Trend(days, y, TrendOptions{Method: m})
		if err != nil {
			t.Fatalf("%s: %v", m, err)
		}
		near(t, string(m)+" slope/30d", r.SlopePer30d, 0.3, 1e-12)
		near(t, string(m)+" intercept", r.Intercept, 1.2, 1e-12)
		near(t, string(m)+" CI low", r.CILow, 0.3, 1e-12)
		near(t, string(m)+" CI high", r.CIHigh, 0.3, 1e-12)
		if !r.Significant || r.N != len(days) || r.Confidence != 0.95 {
			t.Errorf("%s: significant %v n %d confidence %v", m, r.Significant, r.N, r.Confidence)
		}
	}
}

// Irregularly spaced times: the slope is per 30 days of elapsed time, not
// per 30 samples.
func TestTrendTimesIrregular(t *testing.T) {
	t0 := time.Date(2025, 1, 6, 8, 0, 0, 0, time.UTC)
	offsets := []float64{0, 1, 2, 9, 16, 44, 45, 90, 91.5} // days
	times := make([]time.Time, len(offsets))
	y := make([]float64, len(offsets))
	for i, d := range offsets {
		// Shuffle order slightly: the origin is the earliest time.
		times[i] = t0.Add(time.Duration(d * 24 * float64(time.Hour)))
		y[i] = 100 - 0.02*d // %, −0.6 % per 30 days
	}
	times[0], times[3] = times[3], times[0]
	y[0], y[3] = y[3], y[0]
	r, err := TrendTimes(times, y, TrendOptions{})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "slope/30d", r.SlopePer30d, -0.6, 1e-9)
	near(t, "intercept", r.Intercept, 100, 1e-9)
	if !r.Origin.Equal(t0) {
		t.Errorf("origin %v, want %v", r.Origin, t0)
	}
	if r.Method != TheilSen {
		t.Errorf("default method %q", r.Method)
	}
}

// One gross outlier. On an exact line Theil–Sen is unmoved: only n − 1 of
// the n(n−1)/2 pairwise slopes involve the outlier, so for n ≥ 4 both middle
// ranks are still the true slope (Sen 1968; breakdown point 29 %). On noisy
// data the median can move at most n − 1 ranks among the slopes that do not
// involve the outlier, which bounds the change; least squares moves far
// more.
func TestTrendOutlier(t *testing.T) {
	const n = 30
	days := make([]float64, n)
	exact := make([]float64, n)
	noisy := make([]float64, n)
	rng := rand.New(rand.NewPCG(7, 11))
	for i := range days {
		days[i] = float64(i) * 1.5
		exact[i] = 0.01 * days[i]
		noisy[i] = exact[i] + 0.05*rng.NormFloat64()
	}
	const k = 10 // outlier index
	withOutlier := func(y []float64) []float64 {
		c := slices.Clone(y)
		c[k] += 5 // a 5 mm mis-read, 100 σ
		return c
	}

	ts, err := Trend(days, withOutlier(exact), TrendOptions{})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "Theil–Sen slope/30d with outlier on exact line", ts.SlopePer30d, 0.3, 1e-12)

	clean, _ := Trend(days, noisy, TrendOptions{})
	dirty, _ := Trend(days, withOutlier(noisy), TrendOptions{})
	var rest []float64 // pairwise slopes not involving the outlier
	for i := range n {
		for j := i + 1; j < n; j++ {
			if i != k && j != k {
				rest = append(rest, (noisy[j]-noisy[i])/(days[j]-days[i]))
			}
		}
	}
	slices.Sort(rest)
	m := float64(n*(n-1)/2+1) / 2 // median rank among all slopes
	bound := 30 * (rest[int(math.Ceil(m))-1] - rest[int(math.Floor(m))-(n-1)-1])
	moved := math.Abs(dirty.SlopePer30d - clean.SlopePer30d)
	if moved > bound {
		t.Errorf("Theil–Sen moved %.4g per 30 d, bound %.4g", moved, bound)
	}
	olsClean, _ := Trend(days, noisy, TrendOptions{Method: OLS})
	olsDirty, _ := Trend(days, withOutlier(noisy), TrendOptions{Method: OLS})
	olsMoved := math.Abs(olsDirty.SlopePer30d - olsClean.SlopePer30d)
	t.Logf("outlier moved Theil–Sen %.4f, OLS %.4f mm per 30 days", moved, olsMoved)
	if olsMoved < 5*moved {
		t.Errorf("OLS moved %.4g, only %.1f× Theil–Sen's %.4g; the outlier should dominate least squares", olsMoved, olsMoved/moved, moved)
	}
}

// OLS against gonum and against a published example. Anscombe's quartet,
// set I (Anscombe, The American Statistician 27(1), 1973): fitted line
// y = 3.00 + 0.500x; the slope's standard error 0.1179 and t(0.975, 9) =
// 2.262 are the usual regression output for it (from memory), giving a 95 %
// interval 0.500 ± 0.2667. Here x is read as days.
func TestTrendOLS(t *testing.T) {
	x := []float64{10, 8, 13, 9, 11, 14, 6, 4, 12, 7, 5}
	y := []float64{8.04, 6.95, 7.58, 8.81, 8.33, 9.96, 7.24, 4.26, 10.84, 4.82, 5.68}
	r, err := Trend(x, y, TrendOptions{Method: OLS})
	if err != nil {
		t.Fatal(err)
	}
	alpha, beta := stat.LinearRegression(x, y, nil, false)
	near(t, "slope vs gonum", r.SlopePerDay, beta, 1e-12)
	near(t, "intercept vs gonum", r.Intercept, alpha, 1e-12)
	near(t, "Anscombe slope", r.SlopePerDay, 0.500, 0.0005)
	near(t, "Anscombe intercept", r.Intercept, 3.00, 0.005)
	// Standard error from the correlation, an independent route:
	// se(b) = |b|·sqrt((1/r² − 1)/(n − 2)).
	rho := stat.Correlation(x, y, nil)
	se := math.Abs(beta) * math.Sqrt((1/(rho*rho)-1)/float64(len(x)-2))
	near(t, "Anscombe se", se, 0.1179, 0.00005)
	half := (r.CIHigh - r.CILow) / 2 / 30
	near(t, "CI half-width", half, 2.262157*se, 1e-5)
	near(t, "CI half-width (printed)", half, 0.2667, 0.0001)
	if !r.Significant {
		t.Error("Anscombe I slope should be significant at 95 %")
	}
}

// Interval coverage on simulated data: y = a + b·day + N(0, σ²) at
// irregular days, 4000 replications with a fixed seed. The proportion of
// 95 % intervals that contain the true slope has binomial standard error
// sqrt(0.95·0.05/4000) ≈ 0.0034; allow 4 of them (0.014). OLS intervals are
// exact under normal errors; Sen's interval is exact up to the normal
// approximation of Kendall's S.
func TestTrendCoverage(t *testing.T) {
	const reps, n, slope = 4000, 20, 0.002
	rng := rand.New(rand.NewPCG(2024, 5))
	days, y := make([]float64, n), make([]float64, n)
	for _, m := range []TrendMethod{OLS, TheilSen} {
		var covered, significant int
		for range reps {
			for i := range days {
				days[i] = 180 * rng.Float64()
				y[i] = 0.5 + slope*days[i] + 0.1*rng.NormFloat64()
			}
			r, err := Trend(days, y, TrendOptions{Method: m})
			if err != nil {
				t.Fatal(err)
			}
			if r.CILow <= 30*slope && 30*slope <= r.CIHigh {
				covered++
			}
			if r.Significant {
				significant++
			}
		}
		cov := float64(covered) / reps
		t.Logf("%s: coverage %.3f, significant in %d of %d", m, cov, significant, reps)
		if math.Abs(cov-0.95) > 4*math.Sqrt(0.95*0.05/reps) {
			t.Errorf("%s: 95%% interval coverage %.3f", m, cov)
		}
	}
}

func TestProjectCrossing(t *testing.T) {
	t0 := time.Date(2025, 3, 1, 0, 0, 0, 0, time.UTC)
	day := func(d float64) time.Time { return t0.Add(time.Duration(d * 24 * float64(time.Hour))) }
	var times []time.Time
	var up, down []float64
	for d := 0.0; d <= 10; d += 1.25 {
		times = append(times, day(d))
		up = append(up, 0.1*d)      // mm, rising 0.1 mm/day
		down = append(down, -0.1*d) // mm, falling
	}
	rise, err := TrendTimes(times, up, TrendOptions{})
	if err != nil {
		t.Fatal(err)
	}
	last := times[len(times)-1]
	if got := ProjectCrossing(rise, last, 2); got == nil || !got.Equal(day(20)) {
		t.Errorf("upper crossing %v, want %v (0.1 mm/day reaches 2 mm at day 20)", got, day(20))
	}
	if got := ProjectCrossing(rise, last, -2); got != nil {
		t.Errorf("rising line crosses lower limit at %v, want nil", got)
	}
	if got := ProjectCrossing(rise, day(30), 2); got != nil {
		t.Errorf("line already past the limit: %v, want nil", got)
	}
	fall, err := TrendTimes(times, down, TrendOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if got := ProjectCrossing(fall, last, -1.5); got == nil || !got.Equal(day(15)) {
		t.Errorf("lower crossing %v, want %v", got, day(15))
	}
	if d, ok := ProjectCrossingDay(fall, 10, -1.5); !ok || math.Abs(d-15) > 1e-9 {
		t.Errorf("lower crossing day %v %v, want 15", d, ok)
	}

	// Not significant: no projection even though the slope is not zero.
	flat := []float64{0, 1, 0, 1, 0, 1, 0, 1, 0.1}
	r, err := TrendTimes(times, flat, TrendOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if r.Significant || ProjectCrossing(r, last, 5) != nil {
		t.Errorf("insignificant trend %+v projected", r)
	}
}

func TestTrendErrors(t *testing.T) {
	d5 := []float64{0, 1, 2, 3, 4}
	y5 := []float64{0, 1, 2, 3, 5}
	cases := map[string]struct {
		days, y []float64
		o       TrendOptions
	}{
		"two points":         {[]float64{0, 1}, []float64{0, 1}, TrendOptions{}},
		"length mismatch":    {d5, y5[:4], TrendOptions{}},
		"NaN value":          {d5, []float64{0, 1, math.NaN(), 3, 4}, TrendOptions{}},
		"same day":           {[]float64{2, 2, 2, 2, 2}, y5, TrendOptions{}},
		"confidence 95":      {d5, y5, TrendOptions{Confidence: 95}},
		"method":             {d5, y5, TrendOptions{Method: "lowess"}},
		"Theil–Sen 4 points": {d5[:4], y5[:4], TrendOptions{}},
	}
	for name, c := range cases {
		if _, err := Trend(c.days, c.y, c.o); err == nil {
			t.Errorf("%s: no error", name)
		}
	}
	if _, err := Trend(d5, y5, TrendOptions{Method: OLS}); err != nil {
		t.Errorf("OLS with 5 points: %v", err)
	}
	if _, err := Trend(append(d5, 5), append(y5, 6), TrendOptions{}); err != nil {
		t.Errorf("Theil–Sen with 6 points: %v", err)
	}
	if _, err := TrendTimes(make([]time.Time, 3), y5, TrendOptions{}); err == nil {
		t.Error("times/values mismatch: no error")
	}
}

// Selection must give exactly what sorting gives, ties included.
func TestSelectRanksMatchesSort(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for trial := range 200 {
		n := 1 + rng.IntN(300)
		s := make([]float64, n)
		for i := range s {
			s[i] = float64(rng.IntN(1 + trial%20)) // many ties on some trials
			if trial%3 == 0 {
				s[i] = rng.NormFloat64()
			}
		}
		sorted := slices.Sorted(slices.Values(s))
		a := 1 + rng.Float64()*float64(n-1)
		b := a + rng.Float64()*(float64(n)-a)
		c := b + rng.Float64()*(float64(n)-b)
		ranks := []float64{a, b, c, float64(n)}
		got := make([]float64, len(ranks))
		selectRanks(slices.Clone(s), ranks, got)
		for j, r := range ranks {
			if want := rankValue(sorted, r); math.Abs(got[j]-want) > 1e-12*math.Max(1, math.Abs(want)) {
				t.Fatalf("trial %d rank %v: select %v, sort %v", trial, r, got[j], want)
			}
		}
	}
}
