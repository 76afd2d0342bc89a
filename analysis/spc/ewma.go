package spc

import (
	"fmt"
	"math"
)

// LimitsChoice selects EWMA control limits.
type LimitsChoice string

const (
	// LimitsExact uses the time-varying limits, narrower for the first
	// points (Montgomery, Introduction to Statistical Quality Control, §9.2).
	LimitsExact LimitsChoice = "exact"
	// LimitsSteady uses the asymptotic limits from the first point
	// (NIST/SEMATECH e-Handbook §6.3.2.4).
	LimitsSteady LimitsChoice = "steady"
)

// Default EWMA design: λ = 0.1, L = 2.814, an in-control ARL of about 500
// with steady-state limits (Lucas & Saccucci, Technometrics 32(1), 1990;
// from memory, checked by simulation in the tests). With the time-varying
// limits used by default the in-control ARL is slightly lower (about 490 by
// simulation) because the first points face narrower limits. A small λ suits
// the slow drifts of beam-edge positions.
const (
	DefaultEWMALambda = 0.1
	DefaultEWMAL      = 2.814
)

// ewmaARL500 lists (λ, L) pairs with an in-control ARL of about 500
// (Lucas & Saccucci 1990, from memory).
var ewmaARL500 = [...][2]float64{{0.05, 2.615}, {0.10, 2.814}, {0.20, 2.962}, {0.25, 2.998}, {0.40, 3.054}}

// EWMADesignL returns the limit width L that gives an in-control ARL of
// about 500 for a tabulated λ (0.05, 0.1, 0.2, 0.25, 0.4), and false for any
// other λ.
func EWMADesignL(lambda float64) (float64, bool) {
	for _, p := range ewmaARL500 {
		if math.Abs(p[0]-lambda) < 1e-12 {
			return p[1], true
		}
	}
	return 0, false
}

// EWMAOptions configures an EWMA chart. Target and Sigma are in the unit of
// the values; L is in sigma.
type EWMAOptions struct {
	Target, Sigma float64
	// Lambda is the weight of the newest value, 0 < λ ≤ 1; zero means
	// DefaultEWMALambda.
	Lambda float64
	// L is the limit width in sigma of the EWMA statistic; zero takes the
	// ARL-500 design for Lambda (see EWMADesignL).
	L float64
	// Limits is LimitsExact (default) or LimitsSteady.
	Limits LimitsChoice
}

// EWMAPoint is one EWMA chart point.
type EWMAPoint struct {
	Z, UCL, LCL float64
	Signal      bool // Z strictly beyond UCL or LCL
}

// EWMAChart evaluates an EWMA chart one value at a time, for streaming use
// (the worker) and for run-length simulation. Create it with NewEWMAChart.
type EWMAChart struct {
	target, lambda, l float64
	steadyHalf        float64 // L·σ·sqrt(λ/(2 − λ))
	exact             bool
	z                 float64
	decay             float64 // (1 − λ)^(2i) after i points
	q                 float64 // (1 − λ)²
}

// NewEWMAChart validates o, fills in defaults and returns a chart with
// z_0 = Target.
func NewEWMAChart(o EWMAOptions) (*EWMAChart, error) {
	if !isFinite(o.Target) {
		return nil, fmt.Errorf("spc: EWMA target %v must be a finite number", o.Target)
	}
	if err := checkSigma(o.Sigma); err != nil {
		return nil, err
	}
	lambda := o.Lambda
	if lambda == 0 {
		lambda = DefaultEWMALambda
	}
	if !(lambda > 0 && lambda <= 1) {
		return nil, fmt.Errorf("spc: EWMA lambda %v must be in (0, 1]; 0.05 to 0.25 detect small drifts", o.Lambda)
	}
	l := o.L
	if l == 0 {
		var ok bool
		if l, ok = EWMADesignL(lambda); !ok {
			return nil, fmt.Errorf("spc: no tabulated ARL-500 limit width for EWMA lambda %v; give L (e.g. 2.7 to 3) or use lambda 0.05, 0.1, 0.2, 0.25 or 0.4", lambda)
		}
	}
	if !(l > 0) || math.IsInf(l, 0) {
		return nil, fmt.Errorf("spc: EWMA limit width L = %v must be a positive number of sigma", o.L)
	}
	var exact bool
	switch o.Limits {
	case "", LimitsExact:
		exact = true
	case LimitsSteady:
	default:
		return nil, fmt.Errorf("spc: EWMA limits %q unknown; use %q or %q", o.Limits, LimitsExact, LimitsSteady)
	}
	return &EWMAChart{
		target: o.Target, lambda: lambda, l: l, exact: exact,
		steadyHalf: l * o.Sigma * math.Sqrt(lambda/(2-lambda)),
		z:          o.Target, decay: 1, q: (1 - lambda) * (1 - lambda),
	}, nil
}

// Lambda returns the weight λ in use (default filled in).
func (c *EWMAChart) Lambda() float64 { return c.lambda }

// L returns the limit width in sigma.
func (c *EWMAChart) L() float64 { return c.l }

// SteadyLimits returns the steady-state limits target ± L·σ·sqrt(λ/(2 − λ)).
func (c *EWMAChart) SteadyLimits() (ucl, lcl float64) {
	return c.target + c.steadyHalf, c.target - c.steadyHalf
}

// Next adds the value x (finite) and returns the new chart point:
//
//	z_i = λ·x_i + (1 − λ)·z_(i−1)
//	limits target ± L·σ·sqrt(λ/(2 − λ)·(1 − (1 − λ)^(2i)))   (exact)
//	limits target ± L·σ·sqrt(λ/(2 − λ))                      (steady)
func (c *EWMAChart) Next(x float64) EWMAPoint {
	c.z = c.lambda*x + (1-c.lambda)*c.z
	half := c.steadyHalf
	if c.exact {
		c.decay *= c.q
		half *= math.Sqrt(1 - c.decay)
	}
	p := EWMAPoint{Z: c.z, UCL: c.target + half, LCL: c.target - half}
	p.Signal = p.Z > p.UCL || p.Z < p.LCL
	return p
}

// EWMAResult is an EWMA chart of a whole series.
type EWMAResult struct {
	Lambda, L            float64   // design used
	Z, UCL, LCL          []float64 // per point (UCL/LCL constant with steady limits)
	Signal               []bool
	SteadyUCL, SteadyLCL float64 // asymptotic limits
	FirstSignal          int     // 0-based, −1 if none
}

// EWMA computes an exponentially weighted moving average chart (Roberts,
// Technometrics 1(3), 1959):
//
//	z_0 = target;  z_i = λ·x_i + (1 − λ)·z_(i−1)
//	exact:  target ± L·σ·sqrt(λ/(2 − λ)·(1 − (1 − λ)^(2i)))
//	steady: target ± L·σ·sqrt(λ/(2 − λ))
//
// (Montgomery, Introduction to Statistical Quality Control, §9.2;
// NIST/SEMATECH e-Handbook §6.3.2.4). A signal is z strictly beyond a limit.
// Values, Target and Sigma share one unit (mm, %).
func EWMA(x []float64, o EWMAOptions) (EWMAResult, error) {
	var r EWMAResult
	c, err := NewEWMAChart(o)
	if err != nil {
		return r, err
	}
	if err := checkFinite("value", x); err != nil {
		return r, err
	}
	r.Lambda, r.L = c.lambda, c.l
	r.SteadyUCL, r.SteadyLCL = c.SteadyLimits()
	buf := make([]float64, 3*len(x))
	r.Z, r.UCL, r.LCL = buf[:len(x):len(x)], buf[len(x):2*len(x):2*len(x)], buf[2*len(x):]
	r.Signal = make([]bool, len(x))
	r.FirstSignal = -1
	for i, v := range x {
		p := c.Next(v)
		r.Z[i], r.UCL[i], r.LCL[i], r.Signal[i] = p.Z, p.UCL, p.LCL, p.Signal
		if p.Signal && r.FirstSignal < 0 {
			r.FirstSignal = i
		}
	}
	return r, nil
}
