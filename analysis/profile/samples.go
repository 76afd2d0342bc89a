package profile

import (
	"fmt"
	"math"
	"slices"
)

// Sample is one reading of a profile: the detector position in mm (signed,
// along the scan axis) and its signal in any linear unit.
type Sample struct {
	PositionMM float64 `json:"position_mm"`
	Signal     float64 `json:"signal"`
}

const (
	// MinSamples is the fewest distinct positions Analyze accepts.
	MinSamples = 10
	// SamePositionMM: positions closer than this are repeats of one point
	// and are averaged.
	SamePositionMM = 1e-6
	// maxAbsPositionMM and maxAbsSignal bound the input so that sums and
	// differences cannot overflow; anything larger is a unit error.
	maxAbsPositionMM = 1e6
	maxAbsSignal     = 1e100
	// repeatNoiseFactor and repeatFloorFrac set how far repeats at one
	// position may spread (max − min) before they are called conflicting:
	// more than repeatNoiseFactor·σ and more than repeatFloorFrac of the
	// peak signal. The range of a few normal readings exceeds 8σ with
	// negligible probability (common practice).
	repeatNoiseFactor = 8
	repeatFloorFrac   = 0.005
)

// curve is a validated profile: positions strictly increasing (mm), one
// signal per position, and the interpolant chosen by the options.
type curve struct {
	x, y  []float64
	cubic *cubicInterp // nil: linear interpolation
}

// newCurve validates, sorts and merges samples into a curve. It never
// modifies samples. Repeats (positions within SamePositionMM) are averaged;
// repeats that spread beyond the noise are an error naming the position.
func newCurve(samples []Sample) (*curve, error) {
	if len(samples) < MinSamples {
		return nil, fmt.Errorf("%w: got %d, need at least %d; scan across the whole field and its tails", ErrTooFewSamples, len(samples), MinSamples)
	}
	for i, s := range samples {
		if err := checkSample(i, s); err != nil {
			return nil, err
		}
	}
	n := len(samples)
	buf := make([]float64, 2*n)
	x, y := buf[:n:n], buf[n:]
	switch {
	case isSorted(samples, 1):
		for i, s := range samples {
			x[i], y[i] = s.PositionMM, s.Signal
		}
	case isSorted(samples, -1):
		for i, s := range samples {
			x[n-1-i], y[n-1-i] = s.PositionMM, s.Signal
		}
	default:
		sorted := slices.Clone(samples)
		slices.SortFunc(sorted, func(a, b Sample) int {
			if a.PositionMM < b.PositionMM {
				return -1
			}
			if a.PositionMM > b.PositionMM {
				return 1
			}
			return 0
		})
		for i, s := range sorted {
			x[i], y[i] = s.PositionMM, s.Signal
		}
	}
	c := &curve{x: x, y: y}
	if err := c.mergeRepeats(); err != nil {
		return nil, err
	}
	if len(c.x) < MinSamples {
		return nil, fmt.Errorf("%w: %d samples but only %d distinct positions, need at least %d", ErrTooFewSamples, n, len(c.x), MinSamples)
	}
	if _, peak := c.argmax(); peak <= 0 {
		return nil, fmt.Errorf("%w: the largest signal is %g; check the detector polarity and background subtraction", ErrNoSignal, peak)
	}
	return c, nil
}

func checkSample(i int, s Sample) error {
	if math.IsNaN(s.PositionMM) || math.Abs(s.PositionMM) > maxAbsPositionMM {
		return fmt.Errorf("%w: sample %d has position %g mm; positions must be finite mm within ±%g", ErrNotFinite, i, s.PositionMM, float64(maxAbsPositionMM))
	}
	if math.IsNaN(s.Signal) || math.Abs(s.Signal) > maxAbsSignal {
		return fmt.Errorf("%w: sample %d (position %g mm) has signal %g; remove or fix the sample", ErrNotFinite, i, s.PositionMM, s.Signal)
	}
	return nil
}

// isSorted reports whether positions are non-decreasing (dir 1) or
// non-increasing (dir −1).
func isSorted(s []Sample, dir float64) bool {
	for i := 1; i < len(s); i++ {
		if dir*(s[i].PositionMM-s[i-1].PositionMM) < 0 {
			return false
		}
	}
	return true
}

// mergeRepeats averages runs of positions closer than SamePositionMM, in
// place, and checks that no run spreads beyond the noise.
func (c *curve) mergeRepeats() error {
	x, y := c.x, c.y
	n := len(x)
	out := 0
	worstRange, worstPos, worstCount := 0.0, 0.0, 0
	for i := 0; i < n; {
		j := i + 1
		sx, sy := x[i], y[i]
		lo, hi := y[i], y[i]
		for j < n && x[j]-x[i] < SamePositionMM {
			sx += x[j]
			sy += y[j]
			lo, hi = min(lo, y[j]), max(hi, y[j])
			j++
		}
		k := float64(j - i)
		x[out], y[out] = sx/k, sy/k
		if hi-lo > worstRange {
			worstRange, worstPos, worstCount = hi-lo, x[out], j-i
		}
		out++
		i = j
	}
	c.x, c.y = x[:out], y[:out]
	if out == n || worstRange == 0 || out < 3 {
		return nil
	}
	_, peak := c.argmax()
	// Merged points average several readings; scale the noise of the merged
	// profile back to one reading.
	sigma := c.noiseSigma() * math.Sqrt(float64(n)/float64(out))
	allowed := max(repeatNoiseFactor*sigma, repeatFloorFrac*math.Abs(peak))
	if worstRange > allowed {
		return fmt.Errorf("%w: %d readings at %g mm spread over %.3g (%.2f%% of the peak signal), more than the %.3g the noise allows; check that repeated scans used the same settings, or drop one",
			ErrConflictingRepeats, worstCount, worstPos, worstRange, 100*worstRange/math.Abs(peak), allowed)
	}
	return nil
}

// noiseSigma estimates the standard deviation of the signal noise from the
// median absolute second difference, which is insensitive to the edges:
//
//	σ ≈ 1.4826 · median|y[i−1] − 2y[i] + y[i+1]| / √6
//
// (for white noise the second difference has variance 6σ²; 1.4826 turns a
// median absolute deviation into σ for normal data — common practice).
func (c *curve) noiseSigma() float64 {
	y := c.y
	d := make([]float64, 0, len(y)-2)
	for i := 1; i+1 < len(y); i++ {
		d = append(d, math.Abs(y[i-1]-2*y[i]+y[i+1]))
	}
	slices.Sort(d)
	return 1.4826 * d[len(d)/2] / math.Sqrt(6)
}

// argmax returns the index and value of the largest signal (the first if
// tied).
func (c *curve) argmax() (int, float64) {
	best := 0
	for i, v := range c.y {
		if v > c.y[best] {
			best = i
		}
	}
	return best, c.y[best]
}

// nearest returns the index of the sample nearest to position x (mm).
func (c *curve) nearest(x float64) int {
	i, _ := slices.BinarySearch(c.x, x)
	if i == len(c.x) {
		return i - 1
	}
	if i > 0 && x-c.x[i-1] < c.x[i]-x {
		return i - 1
	}
	return i
}
