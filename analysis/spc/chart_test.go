package spc

import (
	"encoding/json"
	"math"
	"testing"
	"time"
)

// toJSON marshals out and decodes it generically, as a CLI consumer would.
func toJSON(t *testing.T, out Output) map[string]any {
	t.Helper()
	b, err := json.Marshal(out)
	if err != nil {
		t.Fatalf("marshal: %v", err)
	}
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	return m
}

func point(t *testing.T, m map[string]any, i int) map[string]any {
	t.Helper()
	pts, ok := m["points"].([]any)
	if !ok || i >= len(pts) {
		t.Fatalf("points missing or short: %v", m["points"])
	}
	return pts[i].(map[string]any)
}

func num(t *testing.T, m map[string]any, key string) float64 {
	t.Helper()
	v, ok := m[key].(float64)
	if !ok {
		t.Fatalf("%q = %v (%T), want a number", key, m[key], m[key])
	}
	return v
}

// I-MR on the NIST/SEMATECH e-Handbook §6.3.2.2 data (secondary copy): centre 50.81, UCL 55.8041, LCL 45.8159,
// in control; point 1 has no moving range, point 2's is 2.0.
func TestRunIMR(t *testing.T) {
	x := []float64{49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1}
	out, err := Run(MethodIMR, x, nil, Params{})
	if err != nil {
		t.Fatal(err)
	}
	m := toJSON(t, out)
	if m["chart"] != "imr" || m["first_signal"] != nil {
		t.Errorf("chart %v first_signal %v", m["chart"], m["first_signal"])
	}
	if _, ok := m["first_signal"]; !ok {
		t.Error("first_signal must be present (null) when there is no signal")
	}
	near(t, "centre", num(t, m, "centre"), 50.81, 0.005)
	near(t, "ucl", num(t, m, "ucl"), 55.8041, 0.00005)
	near(t, "lcl", num(t, m, "lcl"), 45.8159, 0.00005)
	p1, p2 := point(t, m, 0), point(t, m, 1)
	if _, ok := p1["mr"]; ok || p1["index"] != 1.0 || p1["signal"] != false {
		t.Errorf("point 1 = %v", p1)
	}
	near(t, "mr 2", num(t, p2, "mr"), 2.0, 1e-9)
}

// EWMA and CUSUM on Montgomery's Example 9.1 data (Introduction to
// Statistical Quality Control): both first signal at sample
// 29. EWMA top-level limits are the steady ones (10.6194 / 9.3806); each
// point carries its time-varying limits. The CUSUM signal point carries N+ = 7
// and the new-mean estimate 11.25.
func TestRunEWMAAndCUSUM(t *testing.T) {
	target, sigma := 10.0, 1.0
	p := Params{Target: &target, Sigma: &sigma, Lambda: 0.1, LimitWidth: 2.7}
	out, err := Run(MethodEWMA, montgomeryData, nil, p)
	if err != nil {
		t.Fatal(err)
	}
	m := toJSON(t, out)
	if m["first_signal"] != 29.0 || m["limits"] != "exact" {
		t.Errorf("ewma first_signal %v limits %v", m["first_signal"], m["limits"])
	}
	near(t, "ewma ucl", num(t, m, "ucl"), 10.6194, 0.00005)
	near(t, "ewma lcl", num(t, m, "lcl"), 9.3806, 0.00005)
	p29 := point(t, m, 28)
	if p29["signal"] != true || num(t, p29, "z") <= num(t, p29, "ucl") {
		t.Errorf("ewma point 29 = %v", p29)
	}
	near(t, "z1", num(t, point(t, m, 0), "z"), 9.945, 1e-12)

	p.Limits = LimitsSteady
	out, _ = Run(MethodEWMA, montgomeryData, nil, p)
	if _, ok := toJSON(t, out)["points"].([]any)[0].(map[string]any)["ucl"]; ok {
		t.Error("steady limits: points should not carry their own ucl")
	}

	out, err = Run(MethodCUSUM, montgomeryData, nil, Params{Target: &target, Sigma: &sigma})
	if err != nil {
		t.Fatal(err)
	}
	m = toJSON(t, out)
	if m["first_signal"] != 29.0 {
		t.Errorf("cusum first_signal %v, want 29", m["first_signal"])
	}
	near(t, "cusum ucl (H·σ)", num(t, m, "ucl"), 5, 1e-12)
	p29 = point(t, m, 28)
	near(t, "cplus 29", num(t, p29, "cplus"), 5.28, 1e-9)
	near(t, "new mean", num(t, p29, "new_mean"), 11.25, 0.005)
	if p29["nplus"] != 7.0 || p29["direction"] != "up" || p29["signal"] != true {
		t.Errorf("cusum point 29 = %v", p29)
	}
	if _, ok := point(t, m, 27)["new_mean"]; ok {
		t.Error("new_mean present before the signal")
	}
}

// Without Target and Sigma the chart estimates them from the data (mean and
// MR̄/d2), here the NIST data: 50.81 and 1.8778/1.128.
func TestRunEstimatesBaseline(t *testing.T) {
	x := []float64{49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1}
	out, err := Run(MethodEWMA, x, nil, Params{})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "centre", *out.Centre, 50.81, 0.005)
	near(t, "sigma", *out.Sigma, 1.8778/1.128, 0.0001)
	if *out.Lambda != 0.1 || *out.LimitWidth != 2.814 {
		t.Errorf("default design %v %v", *out.Lambda, *out.LimitWidth)
	}
	// BaselinePoints limits the estimate to the leading points.
	out, err = Run(MethodCUSUM, append(x, 70, 71, 72), nil, Params{BaselinePoints: 10})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "baseline centre", *out.Centre, 50.81, 0.005)
	if out.FirstSignal == nil || *out.FirstSignal != 11 {
		t.Errorf("first signal %v, want 11 (the jump to 70)", out.FirstSignal)
	}
}

// Trend with times and a tolerance: a line rising 0.05 mm/day from 0 with
// tolerance ±1 mm crosses the upper limit at day 20, 10 days after the last
// point (analytic).
func TestRunTrend(t *testing.T) {
	t0 := time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)
	var times []time.Time
	var y []float64
	for d := 0; d <= 10; d++ {
		times = append(times, t0.AddDate(0, 0, d))
		y = append(y, 0.05*float64(d))
	}
	target, tol := 0.0, 1.0
	out, err := Run(MethodTrend, y, times, Params{Target: &target, Tolerance: &tol})
	if err != nil {
		t.Fatal(err)
	}
	m := toJSON(t, out)
	near(t, "slope_per_30d", num(t, m, "slope_per_30d"), 1.5, 1e-12)
	near(t, "ci_low", num(t, m, "ci_low"), 1.5, 1e-12)
	near(t, "ci_high", num(t, m, "ci_high"), 1.5, 1e-12)
	if m["method"] != "theil-sen" || m["significant"] != true || m["spacing"] != "time" || m["first_signal"] != nil {
		t.Errorf("trend output %v", m)
	}
	c, ok := m["projected_crossing"].(map[string]any)
	if !ok {
		t.Fatalf("no projected_crossing: %v", m)
	}
	near(t, "days_after_last", num(t, c, "days_after_last"), 10, 1e-9)
	if c["side"] != "upper" || c["at"] != t0.AddDate(0, 0, 20).Format(time.RFC3339) {
		t.Errorf("crossing %v", c)
	}
	near(t, "fitted 3", num(t, point(t, m, 3), "fitted"), 0.15, 1e-12)

	// Without times points are one day apart; OLS on request.
	out, err = Run(MethodTrend, y, nil, Params{TrendMethod: OLS})
	if err != nil {
		t.Fatal(err)
	}
	if out.Spacing != "index" || out.Method != "ols" || math.Abs(*out.SlopePer30d-1.5) > 1e-9 || out.Crossing != nil {
		t.Errorf("index trend %+v", out)
	}
}

func TestRunErrors(t *testing.T) {
	x := []float64{1, 2, 3, 4, 5, 6}
	neg := -1.0
	cases := map[string]func() error{
		"method":         func() error { _, err := Run("xbar", x, nil, Params{}); return err },
		"no values":      func() error { _, err := Run(MethodIMR, nil, nil, Params{}); return err },
		"times mismatch": func() error { _, err := Run(MethodTrend, x, make([]time.Time, 2), Params{}); return err },
		"NaN":            func() error { _, err := Run(MethodIMR, []float64{1, math.NaN()}, nil, Params{}); return err },
		"tolerance":      func() error { _, err := Run(MethodTrend, x, nil, Params{Tolerance: &neg}); return err },
		"short baseline": func() error { _, err := Run(MethodEWMA, x[:4], nil, Params{}); return err },
		"sigma":          func() error { _, err := Run(MethodCUSUM, x, nil, Params{Sigma: &neg}); return err },
	}
	for name, f := range cases {
		if f() == nil {
			t.Errorf("%s: no error", name)
		}
	}
}
