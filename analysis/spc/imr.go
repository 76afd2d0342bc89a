package spc

import (
	"errors"
	"fmt"
	"math"
)

// IMROptions configures an individuals and moving-range chart.
type IMROptions struct {
	// Centre is a known centre line (same unit as the values); nil uses the
	// mean of x.
	Centre *float64
	// Sigma is a known process standard deviation; nil estimates it as
	// MR̄/d2.
	Sigma *float64
	// Constants picks d2 and D4: ConstantsTable (default) or ConstantsExact.
	Constants ConstantsChoice
	// L is the individuals limit width in sigma; zero means 3.
	L float64
}

// IMRResult is an individuals and moving-range chart. Values keep the unit
// of the input (mm, %).
type IMRResult struct {
	Centre, Sigma float64 // centre line and σ̂ used for the limits
	UCL, LCL      float64 // individuals limits, Centre ± L·Sigma
	L             float64 // limit width in sigma

	MRBar    float64   // mean moving range of x (NaN with one point)
	MRCentre float64   // MR chart centre: MR̄, or d2·σ when Sigma is known
	MRUCL    float64   // MR chart UCL = D4·MRCentre (MR LCL is D3·MRCentre = 0)
	MR       []float64 // MR[i] = |x[i] − x[i−1]|; MR[0] is NaN (no predecessor)

	Signal      []bool // x[i] strictly beyond UCL or LCL
	MRSignal    []bool // MR[i] strictly above MRUCL
	FirstSignal int    // 0-based index of the first individuals signal, −1 if none
}

// ErrNoSpread is returned when the values do not vary, so sigma cannot be
// estimated from them.
var ErrNoSpread = errors.New("spc: the values do not vary (mean moving range is 0), so sigma cannot be estimated; give a known sigma")

// IMR computes a Shewhart individuals (I) and moving-range (MR) chart:
//
//	MR_i  = |x_i − x_(i−1)|,  i = 2..n;   MR̄ = sum MR_i / (n − 1)
//	σ̂     = MR̄ / d2                       (d2 = 1.128 for ranges of two)
//	I:    centre = x̄ (or the given centre), limits centre ± L·σ̂   (L = 3)
//	MR:   centre MR̄, UCL = D4·MR̄ (D4 = 3.267), LCL = D3·MR̄ = 0
//
// With L = 3 the individuals limits are x̄ ± 2.66·MR̄ (NIST/SEMATECH
// e-Handbook of Statistical Methods §6.3.2.2; Montgomery, Introduction to
// Statistical Quality Control, §6.4). When Sigma is known the MR chart centre
// is d2·σ. A point exactly on a limit is in control.
//
// It needs at least two values unless Sigma is given.
func IMR(x []float64, o IMROptions) (IMRResult, error) {
	var r IMRResult
	if len(x) == 0 {
		return r, errors.New("spc: IMR needs at least one value")
	}
	if err := checkFinite("value", x); err != nil {
		return r, err
	}
	d2, d4, err := mrConstants(o.Constants)
	if err != nil {
		return r, err
	}
	r.L = o.L
	if r.L == 0 {
		r.L = 3
	}
	if !(r.L > 0) || math.IsInf(r.L, 0) {
		return r, fmt.Errorf("spc: limit width L = %v must be a positive number of sigma", o.L)
	}

	r.Centre = mean(x)
	if o.Centre != nil {
		if !isFinite(*o.Centre) {
			return r, fmt.Errorf("spc: centre %v must be a finite number", *o.Centre)
		}
		r.Centre = *o.Centre
	}
	r.MRBar = math.NaN()
	if len(x) >= 2 {
		r.MRBar = meanMovingRange(x)
	}
	switch {
	case o.Sigma != nil:
		if err := checkSigma(*o.Sigma); err != nil {
			return r, err
		}
		r.Sigma = *o.Sigma
		r.MRCentre = d2 * r.Sigma
	case len(x) < 2:
		return r, errors.New("spc: IMR needs at least two values to estimate sigma from moving ranges; add values or give a known sigma")
	case r.MRBar == 0:
		return r, ErrNoSpread
	default:
		r.Sigma = r.MRBar / d2
		r.MRCentre = r.MRBar
	}
	r.UCL = r.Centre + r.L*r.Sigma
	r.LCL = r.Centre - r.L*r.Sigma
	r.MRUCL = d4 * r.MRCentre

	r.MR = make([]float64, len(x))
	flags := make([]bool, 2*len(x))
	r.Signal, r.MRSignal = flags[:len(x):len(x)], flags[len(x):]
	r.FirstSignal = -1
	r.MR[0] = math.NaN()
	for i, v := range x {
		if i > 0 {
			r.MR[i] = math.Abs(v - x[i-1])
			r.MRSignal[i] = r.MR[i] > r.MRUCL
		}
		if v > r.UCL || v < r.LCL {
			r.Signal[i] = true
			if r.FirstSignal < 0 {
				r.FirstSignal = i
			}
		}
	}
	return r, nil
}
