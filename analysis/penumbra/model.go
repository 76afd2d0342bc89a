package penumbra

import (
	"fmt"
	"math"
	"sort"
	"strings"
	"time"
)

// Point is one measured 80–20 penumbra of one edge.
type Point struct {
	ValueMM    float64    // 80–20 penumbra in the measurement plane, mm
	SSDcm      float64    // source-to-surface distance, cm
	DepthCm    float64    // depth of the measurement plane, cm
	Collimator Collimator // the collimator that forms the edge
	Edge       string     // "X1", "B2P30", …
	Setup      string     // the series geometry, e.g. "20×20 cm, SSD 90 d 10"
	Method     string     // measurement method ("scan", "film", …)
	At         time.Time  // when it was measured
}

// Radiological forms.
const (
	FormLinear   = "r0 + r1·d" // R(d) = r0 + r1·d, r0 in mm, r1 in mm/cm
	FormConstant = "r0"        // R = r0, mm: every setup at one depth
)

// Residual summarises the fit's residuals (measured − modelled, mm) of one
// collimator at one setup.
type Residual struct {
	Collimator Collimator `json:"collimator"`
	Setup      string     `json:"setup"`
	N          int        `json:"n"`
	MeanMM     float64    `json:"mean_mm"`
	RMSMM      float64    `json:"rms_mm"`
}

// Model is a beam's fitted penumbra model for one measurement method.
type Model struct {
	Method   string
	Geometry Geometry
	// SourceSigmaMM is σ_s, the source's Gaussian standard deviation, mm,
	// with its standard error.
	SourceSigmaMM   float64
	SourceSigmaSEMM float64
	// Form is FormLinear or FormConstant; R holds r0 (mm) and, for
	// FormLinear, r1 (mm/cm); RSE their standard errors.
	Form string
	R    []float64
	RSE  []float64
	// Cov is the covariance of (σ_s, r0[, r1]).
	Cov [][]float64
	// PointsUsed is the number of points fitted; RMSResidualMM the root
	// mean square of measured − modelled, mm; DF the residual degrees of
	// freedom.
	PointsUsed    int
	RMSResidualMM float64
	DF            int
	Residuals     []Residual
	PeriodStart   time.Time // start of the baseline period the points come from (set by the caller)
}

// RAt is the radiological part R(d) at depth d (cm), mm.
func (m Model) RAt(depthCm float64) float64 {
	r := m.R[0]
	if len(m.R) > 1 {
		r += m.R[1] * depthCm
	}
	return r
}

// PenumbraMM is the modelled 80–20 penumbra, mm, of an edge of collimator
// c at depth d below a surface at SSD (cm):
//
//	P = √((1.6832·σ_s·M)² + R(d)²),   M = (SSD + d − SCD)/SCD
//
// NaN when the collimator's SCD is unknown or not above the plane.
func (m Model) PenumbraMM(ssdCm, depthCm float64, c Collimator) float64 {
	return quadrature(m.SourceSigmaMM, m.RAt(depthCm), Magnification(ssdCm, depthCm, m.Geometry.SCD(c)))
}

func quadrature(sigma, r, mag float64) float64 {
	g := K8020 * sigma * mag
	return math.Sqrt(g*g + r*r)
}

// Minimum data for a fit.
const (
	minPointsPerParam = 3 // at least 3 points per fitted parameter
	weightFloorMM     = 0.02
)

// Fit fits σ_s and R(d) to points by weighted least squares. Each point is
// weighted by the inverse variance of its series (same setup and edge),
// estimated from the series' spread about its mean and floored at 0.02 mm;
// a series of fewer than three points gets the median weight.
//
// Fit refuses, with a message that says what to measure, data that cannot
// separate the source from the radiological part: edges of one collimator
// only (σ_s·M and R are then confounded), a single setup, too few points,
// or a point whose collimator has no known SCD. The form is FormLinear when
// the points cover two or more depths, else FormConstant.
func Fit(points []Point, g Geometry) (Model, error) {
	if len(points) == 0 {
		return Model{}, fmt.Errorf("there are no penumbra points to fit; record penumbra at the edges of two collimators and at two setups (SSD or depth)")
	}
	colls := map[Collimator]int{}
	setups := map[string]int{}
	depths := map[float64]bool{}
	mags := make([]float64, len(points))
	for i, p := range points {
		if !p.Collimator.Valid() {
			return Model{}, fmt.Errorf("point %d has collimator %q; use upper, lower or mlc", i, p.Collimator)
		}
		scd := g.SCD(p.Collimator)
		if scd <= 0 {
			return Model{}, fmt.Errorf("the machine has no source-to-collimator distance for the %s; record its collimator geometry", p.Collimator.Label())
		}
		mags[i] = Magnification(p.SSDcm, p.DepthCm, scd)
		if math.IsNaN(mags[i]) || math.IsNaN(p.ValueMM) || math.IsInf(p.ValueMM, 0) || p.ValueMM <= 0 {
			return Model{}, fmt.Errorf("point %d (%s at %s) is not usable: penumbra %v mm, SSD %v cm, depth %v cm", i, p.Edge, p.Setup, p.ValueMM, p.SSDcm, p.DepthCm)
		}
		colls[p.Collimator]++
		setups[p.Setup]++
		depths[p.DepthCm] = true
	}
	if len(colls) < 2 {
		for c := range colls {
			return Model{}, fmt.Errorf("the baseline has penumbra of the %s only: the source and the radiological part cannot be told apart from one collimator; record the penumbra of a second collimator (the other jaw pair or the MLC)", c.Label())
		}
	}
	if len(setups) < 2 {
		for s := range setups {
			return Model{}, fmt.Errorf("the baseline has penumbra at one setup only (%s): measure at a second SSD or depth so that the depth dependence can be told from the source", s)
		}
	}
	p := 3
	form := FormLinear
	if len(depths) < 2 {
		p, form = 2, FormConstant
	}
	if len(points) < minPointsPerParam*p+1 {
		return Model{}, fmt.Errorf("%d penumbra points are too few to fit %d parameters; record at least %d", len(points), p, minPointsPerParam*p+1)
	}
	y := make([]float64, len(points))
	for i, pt := range points {
		y[i] = pt.ValueMM
	}
	w := seriesWeights(points)
	f := func(th []float64, i int, grad []float64) float64 {
		r := th[1]
		if p == 3 {
			r += th[2] * points[i].DepthCm
		}
		v := quadrature(th[0], r, mags[i])
		if v < 1e-9 {
			v = 1e-9
		}
		grad[0] = K8020 * K8020 * th[0] * mags[i] * mags[i] / v
		grad[1] = r / v
		if p == 3 {
			grad[2] = r * points[i].DepthCm / v
		}
		return v
	}
	// Several starts: the problem is small and a bad start can settle on
	// the mirror solution with negative R.
	var best lmResult
	bestSS := math.Inf(1)
	mean := 0.0
	for _, v := range y {
		mean += v
	}
	mean /= float64(len(y))
	for _, s0 := range []float64{0.3, 0.8, 2} {
		th := []float64{s0, 0.7 * mean, 0}[:p]
		res, err := levenbergMarquardt(y, w, th, f)
		if err == nil && res.ss < bestSS {
			best, bestSS = res, res.ss
		}
	}
	if math.IsInf(bestSS, 1) {
		return Model{}, fmt.Errorf("the penumbra model did not converge on these points; check the collimator geometry and the points' SSD and depth")
	}
	df := len(points) - p
	cov, err := best.covariance(best.ss / float64(df))
	if err != nil {
		return Model{}, fmt.Errorf("the points cannot separate the source from the radiological part (the fit is degenerate); record the penumbra at more collimators, SSDs or depths")
	}
	m := Model{Method: points[0].Method, Geometry: g, Form: form, PointsUsed: len(points), DF: df}
	m.SourceSigmaMM = math.Abs(best.theta[0])
	m.SourceSigmaSEMM = math.Sqrt(cov.At(0, 0))
	m.R = append([]float64(nil), best.theta[1:]...)
	for j := 1; j < p; j++ {
		m.RSE = append(m.RSE, math.Sqrt(cov.At(j, j)))
	}
	m.Cov = make([][]float64, p)
	for j := range m.Cov {
		m.Cov[j] = make([]float64, p)
		for k := range m.Cov[j] {
			m.Cov[j][k] = cov.At(j, k)
		}
	}
	if best.theta[0] < 0 { // σ enters squared: flip the sign of its covariances
		for j := 1; j < p; j++ {
			m.Cov[0][j], m.Cov[j][0] = -m.Cov[0][j], -m.Cov[j][0]
		}
	}
	var ss float64
	for _, pt := range points {
		r := pt.ValueMM - m.PenumbraMM(pt.SSDcm, pt.DepthCm, pt.Collimator)
		ss += r * r
	}
	m.RMSResidualMM = math.Sqrt(ss / float64(len(points)))
	m.Residuals = residuals(m, points)
	return m, nil
}

// seriesWeights returns 1/s² per point, s the standard deviation of its
// series (setup and edge) floored at weightFloorMM.
func seriesWeights(points []Point) []float64 {
	type key struct{ setup, edge string }
	groups := map[key][]int{}
	for i, p := range points {
		k := key{p.Setup, p.Edge}
		groups[k] = append(groups[k], i)
	}
	w := make([]float64, len(points))
	var known []float64
	for _, idx := range groups {
		if len(idx) < 3 {
			continue
		}
		var mean, ss float64
		for _, i := range idx {
			mean += points[i].ValueMM
		}
		mean /= float64(len(idx))
		for _, i := range idx {
			d := points[i].ValueMM - mean
			ss += d * d
		}
		s := math.Max(math.Sqrt(ss/float64(len(idx)-1)), weightFloorMM)
		for _, i := range idx {
			w[i] = 1 / (s * s)
		}
		known = append(known, 1/(s*s))
	}
	fill := 1 / (0.1 * 0.1)
	if len(known) > 0 {
		sort.Float64s(known)
		fill = known[len(known)/2]
	}
	for i := range w {
		if w[i] == 0 {
			w[i] = fill
		}
	}
	return w
}

func residuals(m Model, points []Point) []Residual {
	type key struct {
		c     Collimator
		setup string
	}
	acc := map[key]*Residual{}
	var ss = map[key]float64{}
	for _, p := range points {
		k := key{p.Collimator, p.Setup}
		r := acc[k]
		if r == nil {
			r = &Residual{Collimator: p.Collimator, Setup: p.Setup}
			acc[k] = r
		}
		d := p.ValueMM - m.PenumbraMM(p.SSDcm, p.DepthCm, p.Collimator)
		r.N++
		r.MeanMM += d
		ss[k] += d * d
	}
	out := make([]Residual, 0, len(acc))
	for k, r := range acc {
		r.MeanMM /= float64(r.N)
		r.RMSMM = math.Sqrt(ss[k] / float64(r.N))
		out = append(out, *r)
	}
	sort.Slice(out, func(i, j int) bool {
		if out[i].Collimator != out[j].Collimator {
			return collIndex(out[i].Collimator) < collIndex(out[j].Collimator)
		}
		return strings.Compare(out[i].Setup, out[j].Setup) < 0
	})
	return out
}

func collIndex(c Collimator) int {
	for i, v := range Collimators {
		if v == c {
			return i
		}
	}
	return len(Collimators)
}
