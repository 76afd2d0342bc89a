package spc

import (
	"fmt"
	"math"
	"time"
)

// Chart methods accepted by Run.
const (
	MethodIMR   = "imr"
	MethodEWMA  = "ewma"
	MethodCUSUM = "cusum"
	MethodTrend = "trend"
)

// Params mirror the command-line flags of the chart command. Values share
// the unit of the series (mm, %); K, H and LimitWidth are in sigma.
type Params struct {
	// Target and Sigma are the in-control centre and standard deviation; nil
	// estimates them from the data (mean and MR̄/d2, see EstimateBaseline).
	Target, Sigma *float64
	// BaselinePoints is how many leading points estimate a missing Target or
	// Sigma; 0 uses all points.
	BaselinePoints int

	Constants  ConstantsChoice // imr: table (default) or exact
	LimitWidth float64         // imr: L, default 3; ewma: L, default per the ARL-500 design
	Lambda     float64         // ewma: λ, default 0.1
	Limits     LimitsChoice    // ewma: exact (default) or steady
	K, H       float64         // cusum: reference value and decision interval, defaults 0.5 and 5
	Reset      bool            // cusum: reset the sums after a signal

	TrendMethod TrendMethod // trend: theil-sen (default) or ols
	Confidence  float64     // trend: interval level, default 0.95
	// Tolerance gives trend limits Target ± Tolerance; the output then
	// projects when the fitted line crosses them.
	Tolerance *float64
}

// Point is one chart point in Output. Index is 1-based. Only the statistics
// of the chart in question are present.
type Point struct {
	Index int        `json:"index"`
	Time  *time.Time `json:"time,omitempty"`
	Value float64    `json:"value"`

	MR       *float64 `json:"mr,omitempty"`        // imr; absent on point 1
	MRSignal *bool    `json:"mr_signal,omitempty"` // imr

	Z   *float64 `json:"z,omitempty"`   // ewma
	UCL *float64 `json:"ucl,omitempty"` // ewma with exact (time-varying) limits
	LCL *float64 `json:"lcl,omitempty"` // ewma with exact (time-varying) limits

	CPlus     *float64 `json:"cplus,omitempty"`     // cusum
	CMinus    *float64 `json:"cminus,omitempty"`    // cusum
	NPlus     *int     `json:"nplus,omitempty"`     // cusum
	NMinus    *int     `json:"nminus,omitempty"`    // cusum
	Direction string   `json:"direction,omitempty"` // cusum at a signal: "up" or "down"
	NewMean   *float64 `json:"new_mean,omitempty"`  // cusum at a signal

	Fitted *float64 `json:"fitted,omitempty"` // trend

	Signal bool `json:"signal"`
}

// Crossing is the projected time the fitted trend line reaches a limit.
type Crossing struct {
	Limit float64 `json:"limit"`
	Side  string  `json:"side"` // "upper" or "lower"
	// DaysAfterLast counts from the last point (samples after the last
	// point when the series has no times).
	DaysAfterLast float64    `json:"days_after_last"`
	At            *time.Time `json:"at,omitempty"` // when the series has times
}

// Output is the JSON document of the chart command.
//
// Top-level ucl/lcl/centre are the chart's limits: the individuals limits
// (imr); the steady-state limits (ewma; with exact limits each point also
// carries its own time-varying ucl/lcl, which are the ones signals use); the
// decision interval H·σ as ucl for both C+ and C− with no lcl (cusum); the
// tolerance limits Target ± Tolerance (trend, when given). first_signal is
// the 1-based index of the first signalling point, or null. For trend the
// points carry the fitted line and never signal; significance is reported
// in `significant`.
type Output struct {
	Chart       string   `json:"chart"`
	N           int      `json:"n"`
	Centre      *float64 `json:"centre"`
	Sigma       *float64 `json:"sigma,omitempty"`
	UCL         *float64 `json:"ucl"`
	LCL         *float64 `json:"lcl"`
	FirstSignal *int     `json:"first_signal"`
	Points      []Point  `json:"points"`

	MRBar *float64 `json:"mr_bar,omitempty"` // imr
	MRUCL *float64 `json:"mr_ucl,omitempty"` // imr

	LimitWidth *float64 `json:"limit_width,omitempty"` // imr, ewma: L in sigma
	Lambda     *float64 `json:"lambda,omitempty"`      // ewma
	Limits     string   `json:"limits,omitempty"`      // ewma: "exact" or "steady"
	K          *float64 `json:"k,omitempty"`           // cusum, in sigma
	H          *float64 `json:"h,omitempty"`           // cusum, in sigma

	Method      string    `json:"method,omitempty"`  // trend: "theil-sen" or "ols"
	Spacing     string    `json:"spacing,omitempty"` // trend: "time" (days) or "index" (one sample = one day)
	SlopePer30d *float64  `json:"slope_per_30d,omitempty"`
	CILow       *float64  `json:"ci_low,omitempty"`
	CIHigh      *float64  `json:"ci_high,omitempty"`
	Confidence  *float64  `json:"confidence,omitempty"`
	Significant *bool     `json:"significant,omitempty"`
	Crossing    *Crossing `json:"projected_crossing,omitempty"`
}

// Run evaluates one chart method (imr, ewma, cusum, trend) on values, with
// optional times (nil, or one per value), and returns the JSON-ready output.
func Run(method string, values []float64, times []time.Time, p Params) (Output, error) {
	out := Output{Chart: method, N: len(values)}
	if len(values) == 0 {
		return out, fmt.Errorf("spc: no values to chart")
	}
	if times != nil && len(times) != len(values) {
		return out, fmt.Errorf("spc: %d times but %d values; give one time per value or none", len(times), len(values))
	}
	if err := checkFinite("value", values); err != nil {
		return out, err
	}
	out.Points = make([]Point, len(values))
	for i, v := range values {
		out.Points[i] = Point{Index: i + 1, Value: v}
		if times != nil {
			out.Points[i].Time = &times[i]
		}
	}
	var err error
	switch method {
	case MethodIMR:
		err = runIMR(&out, values, p)
	case MethodEWMA:
		err = runEWMA(&out, values, p)
	case MethodCUSUM:
		err = runCUSUM(&out, values, p)
	case MethodTrend:
		err = runTrend(&out, values, times, p)
	default:
		err = fmt.Errorf("spc: chart method %q unknown; use imr, ewma, cusum or trend", method)
	}
	return out, err
}

// baseline returns Target and Sigma, estimating the missing ones from the
// first BaselinePoints values (all when 0).
func (p Params) baseline(values []float64) (target, sigma float64, err error) {
	if p.Target != nil && p.Sigma != nil {
		return *p.Target, *p.Sigma, nil
	}
	n := p.BaselinePoints
	if n <= 0 {
		n = len(values)
	}
	target, sigma, err = EstimateBaseline(values, n)
	if err != nil {
		return 0, 0, err
	}
	if p.Target != nil {
		target = *p.Target
	}
	if p.Sigma != nil {
		sigma = *p.Sigma
	}
	return target, sigma, nil
}

func runIMR(out *Output, values []float64, p Params) error {
	o := IMROptions{Centre: p.Target, Sigma: p.Sigma, Constants: p.Constants, L: p.LimitWidth}
	if p.BaselinePoints > 0 && (p.Target == nil || p.Sigma == nil) {
		t, s, err := p.baseline(values)
		if err != nil {
			return err
		}
		o.Centre, o.Sigma = &t, &s
	}
	r, err := IMR(values, o)
	if err != nil {
		return err
	}
	out.Centre, out.Sigma, out.UCL, out.LCL = fp(r.Centre), fp(r.Sigma), fp(r.UCL), fp(r.LCL)
	out.MRBar, out.MRUCL, out.LimitWidth = fp(r.MRBar), fp(r.MRUCL), fp(r.L)
	for i := range out.Points {
		pt := &out.Points[i]
		pt.Signal = r.Signal[i]
		if i > 0 {
			pt.MR, pt.MRSignal = fp(r.MR[i]), &r.MRSignal[i]
		}
	}
	out.FirstSignal = oneBased(r.FirstSignal)
	return nil
}

func runEWMA(out *Output, values []float64, p Params) error {
	target, sigma, err := p.baseline(values)
	if err != nil {
		return err
	}
	r, err := EWMA(values, EWMAOptions{Target: target, Sigma: sigma, Lambda: p.Lambda, L: p.LimitWidth, Limits: p.Limits})
	if err != nil {
		return err
	}
	out.Centre, out.Sigma, out.UCL, out.LCL = fp(target), fp(sigma), fp(r.SteadyUCL), fp(r.SteadyLCL)
	out.Lambda, out.LimitWidth = fp(r.Lambda), fp(r.L)
	out.Limits = string(LimitsExact)
	if p.Limits == LimitsSteady {
		out.Limits = string(LimitsSteady)
	}
	for i := range out.Points {
		pt := &out.Points[i]
		pt.Z, pt.Signal = fp(r.Z[i]), r.Signal[i]
		if out.Limits == string(LimitsExact) {
			pt.UCL, pt.LCL = fp(r.UCL[i]), fp(r.LCL[i])
		}
	}
	out.FirstSignal = oneBased(r.FirstSignal)
	return nil
}

func runCUSUM(out *Output, values []float64, p Params) error {
	target, sigma, err := p.baseline(values)
	if err != nil {
		return err
	}
	r, err := CUSUM(values, CUSUMOptions{Target: target, Sigma: sigma, K: p.K, H: p.H, ResetAfterSignal: p.Reset})
	if err != nil {
		return err
	}
	out.Centre, out.Sigma, out.UCL = fp(target), fp(sigma), fp(r.Interval)
	out.K, out.H = fp(r.K), fp(r.H)
	for i := range out.Points {
		pt := &out.Points[i]
		pt.CPlus, pt.CMinus = fp(r.CPlus[i]), fp(r.CMinus[i])
		pt.NPlus, pt.NMinus = &r.NPlus[i], &r.NMinus[i]
		pt.Signal = r.Signal(i)
		if pt.Signal {
			pt.NewMean = fp(r.NewMean[i])
			pt.Direction = "up"
			if r.NewMean[i] < target {
				pt.Direction = "down"
			}
		}
	}
	out.FirstSignal = oneBased(r.FirstSignal)
	return nil
}

func runTrend(out *Output, values []float64, times []time.Time, p Params) error {
	o := TrendOptions{Method: p.TrendMethod, Confidence: p.Confidence}
	var tr TrendResult
	var err error
	var lastDay float64
	if times != nil {
		out.Spacing = "time"
		tr, err = TrendTimes(times, values, o)
		lastDay = tr.Day(times[len(times)-1])
	} else {
		out.Spacing = "index"
		days := make([]float64, len(values))
		for i := range days {
			days[i] = float64(i)
		}
		tr, err = Trend(days, values, o)
		lastDay = float64(len(values) - 1)
	}
	if err != nil {
		return err
	}
	out.Method = string(tr.Method)
	out.SlopePer30d, out.CILow, out.CIHigh = fp(tr.SlopePer30d), fp(tr.CILow), fp(tr.CIHigh)
	out.Confidence, out.Significant = fp(tr.Confidence), &tr.Significant
	for i := range out.Points {
		day := float64(i)
		if times != nil {
			day = tr.Day(times[i])
		}
		out.Points[i].Fitted = fp(tr.ValueAt(day))
	}
	if p.Tolerance == nil {
		return nil
	}
	if !(*p.Tolerance > 0) || math.IsInf(*p.Tolerance, 0) {
		return fmt.Errorf("spc: tolerance %v must be a positive number (same unit as the values)", *p.Tolerance)
	}
	var centre float64
	if p.Target != nil {
		centre = *p.Target
	} else {
		n := p.BaselinePoints
		if n <= 0 || n > len(values) {
			n = len(values)
		}
		centre = mean(values[:n])
	}
	upper, lower := centre+*p.Tolerance, centre-*p.Tolerance
	out.Centre, out.UCL, out.LCL = fp(centre), fp(upper), fp(lower)
	for _, lim := range [...]struct {
		v    float64
		side string
	}{{upper, "upper"}, {lower, "lower"}} {
		day, ok := ProjectCrossingDay(tr, lastDay, lim.v)
		if !ok {
			continue
		}
		c := &Crossing{Limit: lim.v, Side: lim.side, DaysAfterLast: day - lastDay}
		if times != nil {
			c.At = ProjectCrossing(tr, times[len(times)-1], lim.v)
		}
		out.Crossing = c
		break
	}
	return nil
}

// fp returns a pointer to v, or nil when v is NaN or infinite (JSON has no
// such numbers).
func fp(v float64) *float64 {
	if !isFinite(v) {
		return nil
	}
	return &v
}

func oneBased(i int) *int {
	if i < 0 {
		return nil
	}
	i++
	return &i
}
