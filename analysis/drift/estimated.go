package drift

import (
	"math"
	"sync"

	"gonum.org/v1/gonum/stat/distuv"
)

// Estimated baselines. A series whose centre and σ come from its first N
// points carries the estimation error into every later point: the centre
// error is a persistent offset of the standardised deviations, variance
// 1/N of one view, and σ̂ = MR̄/d2 has a relative error of about
//
//	CV(σ̂) ≈ (d3/d2)·sqrt(1.4/(N − 1)) ≈ 0.9/sqrt(N − 1)
//
// (d2 = 1.128, d3 = 0.8525; the factor 1.4 allows for the correlation of
// neighbouring moving ranges — an approximation from memory, 0.21 for
// N = 20). Such charts raise false alarms far more often than their
// nominal design, and unevenly between installations (Jensen, Jones-Farmer,
// Champ & Woodall, J. Quality Technology 38(4), 2006, a review — from
// memory). The correction follows the marginal-run-length idea (Jones,
// Champ & Rigdon, Technometrics 46(1), 2004 — from memory): the chart is
// widened until its false-alarm rate, averaged over the estimation error,
// meets the design's target:
//
//	E_{b,ε}[ 1/ARL⁺(k/s, h/s, δ = b/s) + 1/ARL⁺(k/s, h/s, δ = −b/s) ] = 1/A_c
//	b ~ N(0, v_b)  offset of the pooled z (v_b = Σ_est a_i/N, a_i the view's share of the pooled variance)
//	s² = 1 + ε,  ε ~ N(0, (2·CV(σ̂))²·Σ_est a_i²)  (the pooled noise variance relative to 1)
//
// with Siegmund's ARL⁺ (family.go), and likewise for the Shewhart tail
// E[Φ(−(L − b)/s) + Φ(−(L + b)/s)] = 1/A_c. The averages use Gauss–Hermite
// quadrature (16 × 8 nodes). The detection benchmark measures the result.

// estimationError is the estimated share of one component's pooled
// statistic: the offset variance v_b and the sd of the relative noise
// variance ε.
type estimationError struct{ vb, sdEps float64 }

func (e estimationError) none() bool { return e.vb == 0 && e.sdEps == 0 }

// cvSigmaHat is CV(σ̂) for an MR̄/d2 estimate from n points.
func cvSigmaHat(n int) float64 { return 0.9 / math.Sqrt(float64(max(n, 2)-1)) }

// Gauss–Hermite nodes and weights for ∫ e^{−x²} f(x) dx, turned into
// expectations over N(0, 1): E f(Z) ≈ Σ w_i/√π · f(√2·x_i).
var gh16 = hermite(16)
var gh8 = hermite(8)

type node struct{ z, w float64 }

// hermite computes the n-point Gauss–Hermite rule by Newton's iteration
// on the Hermite polynomials (Press et al., Numerical Recipes, §4.6), as
// standard-normal nodes and weights.
func hermite(n int) []node {
	const pim4 = 0.7511255444649425 // π^{−1/4}
	x := make([]float64, n)
	w := make([]float64, n)
	m := (n + 1) / 2
	var z float64
	for i := 0; i < m; i++ {
		switch i {
		case 0:
			z = math.Sqrt(float64(2*n+1)) - 1.85575*math.Pow(float64(2*n+1), -0.16667)
		case 1:
			z -= 1.14 * math.Pow(float64(n), 0.426) / z
		case 2:
			z = 1.86*z - 0.86*x[0]
		case 3:
			z = 1.91*z - 0.91*x[1]
		default:
			z = 2*z - x[i-2]
		}
		var pp float64
		for range 100 {
			p1, p2 := pim4, 0.0
			for j := 1; j <= n; j++ {
				p3 := p2
				p2 = p1
				p1 = z*math.Sqrt(2/float64(j))*p2 - math.Sqrt(float64(j-1)/float64(j))*p3
			}
			pp = math.Sqrt(2*float64(n)) * p2
			z1 := z
			z = z1 - p1/pp
			if math.Abs(z-z1) <= 1e-14 {
				break
			}
		}
		x[i], x[n-1-i] = z, -z
		w[i] = 2 / (pp * pp)
		w[n-1-i] = w[i]
	}
	out := make([]node, n)
	for i := range out {
		out[i] = node{math.Sqrt2 * x[i], w[i] / math.SqrtPi}
	}
	return out
}

// expectRate averages rate(b, s) over the estimation error.
func expectRate(e estimationError, rate func(b, s float64) float64) float64 {
	var sum float64
	for _, nb := range gh16 {
		b := nb.z * math.Sqrt(e.vb)
		for _, ne := range gh8 {
			s2 := math.Max(1+ne.z*e.sdEps, 0.25)
			sum += nb.w * ne.w * rate(b, math.Sqrt(s2))
		}
	}
	return sum
}

// correctedDesign widens h and L for the estimation error so that the
// expected false-alarm rate per chart is 1/ac.
func correctedDesign(k, ac float64, e estimationError) (h, L float64) {
	cusum := func(h float64) float64 {
		return expectRate(e, func(b, s float64) float64 {
			return 1/siegmundARL1Safe(k/s, h/s, b/s) + 1/siegmundARL1Safe(k/s, h/s, -b/s)
		})
	}
	lo, hi := 0.0, 80.0
	for range 60 {
		mid := (lo + hi) / 2
		if cusum(mid) > 1/ac {
			lo = mid
		} else {
			hi = mid
		}
	}
	h = (lo + hi) / 2
	shew := func(L float64) float64 {
		return expectRate(e, func(b, s float64) float64 {
			return distuv.UnitNormal.CDF(-(L-b)/s) + distuv.UnitNormal.CDF(-(L+b)/s)
		})
	}
	lo, hi = 0, 40
	for range 60 {
		mid := (lo + hi) / 2
		if shew(mid) > 1/ac {
			lo = mid
		} else {
			hi = mid
		}
	}
	return h, (lo + hi) / 2
}

// siegmundARL1Safe is SiegmundARL1 bounded below by 1 session.
func siegmundARL1Safe(k, h, delta float64) float64 {
	return math.Max(SiegmundARL1(k, h, delta), 1)
}

// designCache memoises corrected designs (pure function of its key).
var designCache sync.Map

type designKey struct {
	k, ac   float64
	vb, eps float64
}

func cachedCorrected(k, ac float64, e estimationError) (h, L float64) {
	key := designKey{k, ac, math.Round(e.vb*1e4) / 1e4, math.Round(e.sdEps*1e3) / 1e3}
	if v, ok := designCache.Load(key); ok {
		hl := v.([2]float64)
		return hl[0], hl[1]
	}
	e = estimationError{key.vb, key.eps}
	h, L = correctedDesign(k, ac, e)
	designCache.Store(key, [2]float64{h, L})
	return h, L
}
