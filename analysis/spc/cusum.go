package spc

import (
	"fmt"
	"math"
)

// Default CUSUM design: k = 0.5, h = 5 (in sigma), tuned to a 1σ shift. The
// two-sided in-control ARL is about 465 and the ARL at a 1σ shift about 10.4
// (Montgomery, Introduction to Statistical Quality Control, Table 9.3; from
// memory, checked by simulation in the tests). h = 5 is chosen over h = 4
// (ARL 168 in control) so that its false-alarm rate is close to that of the
// default EWMA design (ARL 500).
const (
	DefaultCUSUMK = 0.5
	DefaultCUSUMH = 5.0
)

// CUSUMOptions configures a two-sided tabular CUSUM. Target and Sigma are in
// the unit of the values; K and H are in sigma (the reference value is K·σ
// and the decision interval H·σ).
type CUSUMOptions struct {
	Target, Sigma float64
	K             float64 // reference value in sigma; zero means 0.5
	H             float64 // decision interval in sigma; zero means 5
	// ResetAfterSignal sets both sums and run counters to zero after a
	// signalling point (Halfmark's behaviour after an acknowledged signal).
	// False keeps accumulating, as in Montgomery's examples.
	ResetAfterSignal bool
}

// CUSUMPoint is one tabular CUSUM point. CPlus and CMinus are in the unit of
// the values.
type CUSUMPoint struct {
	CPlus, CMinus        float64
	NPlus, NMinus        int  // consecutive points with C+ > 0 (C− > 0), ending here
	SignalUp, SignalDown bool // C+ > H, C− > H (strict)
	// NewMean is the estimated process mean at a signal,
	// μ0 + K + C+/N+ (up) or μ0 − K − C−/N− (down); NaN without a signal.
	NewMean float64
}

// Signal reports whether either side signalled.
func (p CUSUMPoint) Signal() bool { return p.SignalUp || p.SignalDown }

// CUSUMChart evaluates a tabular CUSUM one value at a time. Create it with
// NewCUSUMChart.
type CUSUMChart struct {
	mu0, kk, hh   float64 // target and K, H in data units
	reset         bool
	cPlus, cMinus float64
	nPlus, nMinus int
	k, h          float64 // in sigma
}

// NewCUSUMChart validates o and fills in the defaults.
func NewCUSUMChart(o CUSUMOptions) (*CUSUMChart, error) {
	if !isFinite(o.Target) {
		return nil, fmt.Errorf("spc: CUSUM target %v must be a finite number", o.Target)
	}
	if err := checkSigma(o.Sigma); err != nil {
		return nil, err
	}
	k, h := o.K, o.H
	if k == 0 {
		k = DefaultCUSUMK
	}
	if h == 0 {
		h = DefaultCUSUMH
	}
	if !(k > 0) || math.IsInf(k, 0) {
		return nil, fmt.Errorf("spc: CUSUM k = %v must be a positive number of sigma (half the shift to detect; 0.5 for 1σ)", o.K)
	}
	if !(h > 0) || math.IsInf(h, 0) {
		return nil, fmt.Errorf("spc: CUSUM h = %v must be a positive number of sigma (4 or 5 are usual)", o.H)
	}
	return &CUSUMChart{mu0: o.Target, k: k, h: h, kk: k * o.Sigma, hh: h * o.Sigma, reset: o.ResetAfterSignal}, nil
}

// DecisionInterval returns H·σ in the unit of the values.
func (c *CUSUMChart) DecisionInterval() float64 { return c.hh }

// Next adds the value x (finite) and returns the new point:
//
//	C+_i = max(0, x_i − (μ0 + K) + C+_(i−1))
//	C−_i = max(0, (μ0 − K) − x_i + C−_(i−1))
//
// with C±_0 = 0, signalling when C+ or C− exceeds H.
func (c *CUSUMChart) Next(x float64) CUSUMPoint {
	c.cPlus = math.Max(0, x-(c.mu0+c.kk)+c.cPlus)
	c.cMinus = math.Max(0, (c.mu0-c.kk)-x+c.cMinus)
	c.nPlus, c.nMinus = runCount(c.cPlus, c.nPlus), runCount(c.cMinus, c.nMinus)
	p := CUSUMPoint{
		CPlus: c.cPlus, CMinus: c.cMinus, NPlus: c.nPlus, NMinus: c.nMinus,
		SignalUp: c.cPlus > c.hh, SignalDown: c.cMinus > c.hh, NewMean: math.NaN(),
	}
	switch {
	case p.SignalUp && p.SignalDown:
		// Both sums beyond H at once only after a long unacknowledged
		// excursion; report the side with the larger sum.
		if c.cPlus >= c.cMinus {
			p.NewMean = c.mu0 + c.kk + c.cPlus/float64(c.nPlus)
		} else {
			p.NewMean = c.mu0 - c.kk - c.cMinus/float64(c.nMinus)
		}
	case p.SignalUp:
		p.NewMean = c.mu0 + c.kk + c.cPlus/float64(c.nPlus)
	case p.SignalDown:
		p.NewMean = c.mu0 - c.kk - c.cMinus/float64(c.nMinus)
	}
	if c.reset && p.Signal() {
		c.cPlus, c.cMinus, c.nPlus, c.nMinus = 0, 0, 0, 0
	}
	return p
}

func runCount(c float64, n int) int {
	if c > 0 {
		return n + 1
	}
	return 0
}

// CUSUMResult is a two-sided tabular CUSUM of a whole series.
type CUSUMResult struct {
	K, H          float64 // design in sigma
	Interval      float64 // decision interval H·σ in the unit of the values
	CPlus, CMinus []float64
	NPlus, NMinus []int
	SignalUp      []bool
	SignalDown    []bool
	NewMean       []float64 // estimated mean at signalling points, NaN elsewhere
	FirstSignal   int       // 0-based, −1 if none
}

// Signal reports whether point i signalled on either side.
func (r *CUSUMResult) Signal(i int) bool { return r.SignalUp[i] || r.SignalDown[i] }

// CUSUM computes a two-sided tabular (algorithmic) CUSUM (Page, Biometrika
// 41, 1954):
//
//	K = k·σ, H = h·σ
//	C+_i = max(0, x_i − (μ0 + K) + C+_(i−1)),  C−_i = max(0, (μ0 − K) − x_i + C−_(i−1))
//	N±_i = number of consecutive points, ending at i, with C± > 0
//	signal when C+_i > H or C−_i > H; estimated new mean at a signal
//	μ̂ = μ0 + K + C+_i/N+_i   or   μ̂ = μ0 − K − C−_i/N−_i
//
// (Montgomery, Introduction to Statistical Quality Control, §9.1). The shift
// probably began after point i − N±_i. Values, Target and Sigma share one
// unit (mm, %).
func CUSUM(x []float64, o CUSUMOptions) (CUSUMResult, error) {
	var r CUSUMResult
	c, err := NewCUSUMChart(o)
	if err != nil {
		return r, err
	}
	if err := checkFinite("value", x); err != nil {
		return r, err
	}
	n := len(x)
	r.K, r.H, r.Interval = c.k, c.h, c.hh
	fbuf := make([]float64, 3*n)
	r.CPlus, r.CMinus, r.NewMean = fbuf[:n:n], fbuf[n:2*n:2*n], fbuf[2*n:]
	ibuf := make([]int, 2*n)
	r.NPlus, r.NMinus = ibuf[:n:n], ibuf[n:]
	bbuf := make([]bool, 2*n)
	r.SignalUp, r.SignalDown = bbuf[:n:n], bbuf[n:]
	r.FirstSignal = -1
	for i, v := range x {
		p := c.Next(v)
		r.CPlus[i], r.CMinus[i], r.NPlus[i], r.NMinus[i] = p.CPlus, p.CMinus, p.NPlus, p.NMinus
		r.SignalUp[i], r.SignalDown[i], r.NewMean[i] = p.SignalUp, p.SignalDown, p.NewMean
		if p.Signal() && r.FirstSignal < 0 {
			r.FirstSignal = i
		}
	}
	return r, nil
}
