package profile

import (
	"math"
	"math/rand/v2"
)

// phi is the standard normal distribution function, Φ(z) = erfc(−z/√2)/2
// (math.Erfc).
func phi(z float64) float64 { return 0.5 * math.Erfc(-z/math.Sqrt2) }

// phiInv is its inverse, Φ⁻¹(p) = √2·erfinv(2p − 1) (math.Erfinv).
func phiInv(p float64) float64 { return math.Sqrt2 * math.Erfinv(2*p-1) }

// erfField is a uniform field with geometric edges at left and right (mm),
// each blurred by a Gaussian of width sigmaL, sigmaR (mm):
//
//	D(x) = Φ((x − L)/σL) − Φ((x − R)/σR)
//
// Its 50% points sit at L and R and its 80–20 width is 2·Φ⁻¹(0.8)·σ
// (derived: Φ⁻¹(0.8) = 0.8416) as long as R − L ≫ σ.
type erfField struct{ left, right, sigmaL, sigmaR float64 }

func (f erfField) at(x float64) float64 {
	return phi((x-f.left)/f.sigmaL) - phi((x-f.right)/f.sigmaR)
}

// rampField has linear edges of width w centred on left and right: 0 → 1
// from L − w/2 to L + w/2. Its 50% points are L and R and its 80–20 width is
// 0.6·w (derived: 80 % and 20 % lie 0.3·w either side of the middle).
type rampField struct{ left, right, w float64 }

func (f rampField) at(x float64) float64 {
	r := func(t float64) float64 { return min(max(t+0.5, 0), 1) }
	return r((x-f.left)/f.w) - r((x-f.right)/f.w)
}

// grid returns from, from+step, … up to and including to (within step/2).
func grid(from, to, step float64) []float64 {
	var xs []float64
	for i := 0; ; i++ {
		x := from + float64(i)*step
		if x > to+step/2 {
			return xs
		}
		xs = append(xs, x)
	}
}

// sampleAt evaluates fn at the positions, scaled by gain, plus Gaussian
// noise of standard deviation noise (same unit as the signal) from rng
// (nil: none).
func sampleAt(fn func(float64) float64, xs []float64, gain, noise float64, rng *rand.Rand) []Sample {
	s := make([]Sample, len(xs))
	for i, x := range xs {
		s[i] = Sample{PositionMM: x, Signal: gain * fn(x)}
		if rng != nil {
			s[i].Signal += noise * rng.NormFloat64()
		}
	}
	return s
}

// jittered returns positions from..to with random spacings uniform in
// [minStep, maxStep].
func jittered(from, to, minStep, maxStep float64, rng *rand.Rand) []float64 {
	var xs []float64
	for x := from; x <= to; x += minStep + (maxStep-minStep)*rng.Float64() {
		xs = append(xs, x)
	}
	return xs
}

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }
