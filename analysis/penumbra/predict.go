package penumbra

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// Prediction is a modelled penumbra with its 95% prediction interval, mm.
type Prediction struct {
	PenumbraMM float64
	IntervalMM [2]float64
}

// Predict returns the modelled 80–20 penumbra of an edge of collimator c
// at depth d below a surface at SSD (cm) and its 95% prediction interval
// for one new measurement:
//
//	P̂ ± t(0.975, DF)·√(gᵀ·Cov·g + s²)
//
// with g = ∂P/∂(σ_s, r0[, r1]) (the delta method) and s the fit's RMS
// residual. It refuses setups the model cannot reach (a collimator with no
// SCD, a plane not below the collimator) and says which value to change.
func (m Model) Predict(ssdCm, depthCm float64, c Collimator) (Prediction, error) {
	if !c.Valid() {
		return Prediction{}, fmt.Errorf("collimator must be upper, lower or mlc (got %q)", c)
	}
	scd := m.Geometry.SCD(c)
	if scd <= 0 {
		return Prediction{}, fmt.Errorf("the machine has no source distance for the %s", c.Label())
	}
	if !(ssdCm >= 50 && ssdCm <= 200) {
		return Prediction{}, fmt.Errorf("ssd_cm must be between 50 and 200 cm (got %v)", ssdCm)
	}
	if !(depthCm >= 0 && depthCm <= 40) {
		return Prediction{}, fmt.Errorf("depth_cm must be between 0 and 40 cm (got %v)", depthCm)
	}
	mag := Magnification(ssdCm, depthCm, scd)
	r := m.RAt(depthCm)
	p := quadrature(m.SourceSigmaMM, r, mag)
	g := []float64{K8020 * K8020 * m.SourceSigmaMM * mag * mag / p, r / p, r * depthCm / p}[:len(m.Cov)]
	var v float64
	for j := range g {
		for k := range g {
			v += g[j] * m.Cov[j][k] * g[k]
		}
	}
	v += m.RMSResidualMM * m.RMSResidualMM
	df := float64(m.DF)
	if df < 1 {
		df = 1
	}
	t := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: df}.Quantile(0.975)
	h := t * math.Sqrt(v)
	return Prediction{PenumbraMM: p, IntervalMM: [2]float64{p - h, p + h}}, nil
}
