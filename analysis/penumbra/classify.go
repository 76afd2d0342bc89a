package penumbra

import (
	"fmt"
	"math"
	"sort"
	"strings"

	"halfmark"
)

// Cause kinds of a penumbra change.
const (
	CauseSource       = "source"       // σ_s changed: edges widened in the ratio of their magnifications
	CauseRadiological = "radiological" // R changed: every edge at a depth widened alike
	CauseSetup        = "setup"        // the change is confined to one setup
	CauseUndetermined = "undetermined" // none of these explains it, or too few points
)

// Decision thresholds of Classify.
const (
	// minChangePoints is the fewest points after the onset Classify reads.
	minChangePoints = 6
	// significantDrop is the z² of a one-parameter change that makes it
	// significant: χ²(1) at 0.999 = 10.83 (NIST/SEMATECH e-Handbook,
	// table of the chi-square distribution — from memory).
	significantDrop = 10.83
	// distinctDrop is how much better (in the same units) the best cause
	// must fit than the runner-up to be named: 9, a likelihood ratio of
	// e^4.5 (common practice for model choice by AIC differences > 4–10).
	distinctDrop = 9
	// minExplained is the fraction of the systematic change the named
	// cause must explain.
	minExplained = 0.6
)

// Classify tells what a penumbra change since an onset is consistent with.
// model is the beam's baseline model (same method); after are the points
// measured since the onset. It fits, against the baseline model:
//
//	source:       P = √((1.6832·(σ_s + Δσ_s)·M)² + R(d)²)
//	radiological: P = √((1.6832·σ_s·M)² + (R(d) + ΔR)²)
//	setup:        P = P_model + δ at one setup only (the best one)
//
// each a one-parameter change, and names the one with the smallest
// residual sum of squares when it is significant (z² = Δ̂²/var(Δ̂) > 10.83,
// χ²(1) at 0.999, with var(Δ̂) counting both the scatter of the new points
// and the uncertainty of the baseline model), it beats the
// runner-up by more than 9 variances and it explains at least 60% of the
// systematic change (the change of the per-series means). Otherwise the
// cause is "undetermined". The cause's SourceSigmaChangeMM and
// RadiologicalChangeMM come from the joint fit of Δσ_s and ΔR.
// ExplainedFraction is (SS₀ − SS_cause)/(SS₀ − SS_series), SS₀ the sum of
// squares of measured − modelled and SS_series what remains after each
// series (setup and edge) takes its own mean change.
//
// The message says it as a physicist would ("edges of the upper jaws
// widened about 2.3 times as much as those of the MLC (…): consistent with
// a larger source, σ_s +0.20 mm"). The error is non-nil only for points the
// model cannot place (unknown collimator or SCD, SSD or depth out of reach).
func Classify(model Model, after []Point) (halfmark.PenumbraCause, string, error) {
	und := halfmark.PenumbraCause{Kind: CauseUndetermined}
	mags := make([]float64, len(after))
	base := make([]float64, len(after))
	e := make([]float64, len(after))
	for i, p := range after {
		mags[i] = Magnification(p.SSDcm, p.DepthCm, model.Geometry.SCD(p.Collimator))
		if !p.Collimator.Valid() || math.IsNaN(mags[i]) || !(p.ValueMM > 0) {
			return und, "", fmt.Errorf("point %d (%s at %s, collimator %q) cannot be placed in the model: check the collimator geometry, SSD and depth", i, p.Edge, p.Setup, p.Collimator)
		}
		base[i] = model.PenumbraMM(p.SSDcm, p.DepthCm, p.Collimator)
		e[i] = p.ValueMM - base[i]
	}
	if len(after) < minChangePoints {
		return und, fmt.Sprintf("%d penumbra points since the onset are too few to tell the cause; %d are needed", len(after), minChangePoints), nil
	}
	s2 := math.Max(model.RMSResidualMM*model.RMSResidualMM, 1e-4)
	ss0 := sumSq(e)
	y := make([]float64, len(after))
	for i, p := range after {
		y[i] = p.ValueMM
	}
	sigma0 := model.SourceSigmaMM
	rAt := func(i int) float64 { return model.RAt(after[i].DepthCm) }

	// Source only.
	src, err := levenbergMarquardt(y, nil, []float64{0}, func(th []float64, i int, g []float64) float64 {
		s, r := sigma0+th[0], rAt(i)
		v := math.Max(quadrature(s, r, mags[i]), 1e-9)
		g[0] = K8020 * K8020 * s * mags[i] * mags[i] / v
		return v
	})
	if err != nil {
		return und, "the source-change fit failed on these points", nil
	}
	// Radiological only.
	rad, err := levenbergMarquardt(y, nil, []float64{0}, func(th []float64, i int, g []float64) float64 {
		r := rAt(i) + th[0]
		v := math.Max(quadrature(sigma0, r, mags[i]), 1e-9)
		g[0] = r / v
		return v
	})
	if err != nil {
		return und, "the radiological-change fit failed on these points", nil
	}
	// Both: the reported changes.
	joint, err := levenbergMarquardt(y, nil, []float64{0, 0}, func(th []float64, i int, g []float64) float64 {
		s, r := sigma0+th[0], rAt(i)+th[1]
		v := math.Max(quadrature(s, r, mags[i]), 1e-9)
		g[0] = K8020 * K8020 * s * mags[i] * mags[i] / v
		g[1] = r / v
		return v
	})
	if err != nil {
		return und, "the joint fit failed on these points", nil
	}
	// One setup: its mean change, the others none.
	bySetup := groupMeans(after, e, func(p Point) string { return p.Setup })
	bestSetup, setupSS := "", math.Inf(1)
	if len(bySetup) >= 2 {
		for _, g := range bySetup {
			if v := ss0 - float64(g.n)*g.mean*g.mean; v < setupSS {
				bestSetup, setupSS = g.key, v
			}
		}
	}
	// The saturated model: every series its own mean change.
	satSS := 0.0
	for _, g := range groupMeans(after, e, func(p Point) string { return p.Setup + "\x00" + p.Edge }) {
		satSS += g.ss
	}

	cause := halfmark.PenumbraCause{Kind: CauseUndetermined,
		SourceSigmaChangeMM: joint.theta[0], RadiologicalChangeMM: joint.theta[1]}
	// Each candidate's change direction at no change, for its z statistic.
	gSrc := make([]float64, len(after))
	gRad := make([]float64, len(after))
	gSet := make([]float64, len(after))
	for i, p := range after {
		r := rAt(i)
		gSrc[i] = K8020 * K8020 * sigma0 * mags[i] * mags[i] / base[i]
		gRad[i] = r / base[i]
		if p.Setup == bestSetup {
			gSet[i] = 1
		}
	}
	type cand struct {
		kind string
		ss   float64
		z2   float64
	}
	cands := []cand{{CauseSource, src.ss, z2(model, after, mags, e, s2, gSrc)}, {CauseRadiological, rad.ss, z2(model, after, mags, e, s2, gRad)}}
	if bestSetup != "" {
		cands = append(cands, cand{CauseSetup, setupSS, z2(model, after, mags, e, s2, gSet)})
	} else {
		cands = append(cands, cand{CauseSetup, math.Inf(1), 0})
	}
	sort.SliceStable(cands, func(i, j int) bool { return cands[i].ss < cands[j].ss })
	best, next := cands[0], cands[1]
	systematic := ss0 - satSS
	if systematic > 0 {
		cause.ExplainedFraction = clamp01((ss0 - best.ss) / systematic)
	}
	byColl := groupMeans(after, e, func(p Point) string { return string(p.Collimator) })
	collText := collimatorChanges(byColl)
	nColl := len(byColl)

	switch {
	case best.z2 < significantDrop:
		cause.ExplainedFraction = 0
		return cause, fmt.Sprintf("no significant change of the penumbra since the onset against the baseline model (%s; %d points)", collText, len(after)), nil
	case nColl < 2 && best.kind != CauseSetup:
		return cause, fmt.Sprintf("only the %s were measured since the onset: a source change cannot be told from a radiological one (%s)", Collimator(byColl[0].key).Label(), collText), nil
	case len(bySetup) < 2 && best.kind == CauseRadiological:
		return cause, fmt.Sprintf("every point since the onset is at one setup (%s): a radiological change cannot be told from a setup matter (%s)", bySetup[0].key, collText), nil
	case (next.ss-best.ss)/s2 < distinctDrop:
		return cause, fmt.Sprintf("a %s change and a %s change fit the penumbra change about equally well (%s); more points at other collimators and setups will tell", best.kind, next.kind, collText), nil
	case cause.ExplainedFraction < minExplained:
		return cause, fmt.Sprintf("no single cause explains the penumbra change: a %s change, the best, explains %.0f%% of it (%s)", best.kind, 100*cause.ExplainedFraction, collText), nil
	}
	cause.Kind = best.kind
	switch best.kind {
	case CauseSource:
		ds := src.theta[0]
		word, size := "widened", "larger"
		if ds < 0 {
			word, size = "narrowed", "smaller"
		}
		near, far := byColl[0], byColl[0]
		for _, g := range byColl {
			scd := model.Geometry.SCD(Collimator(g.key))
			if scd < model.Geometry.SCD(Collimator(near.key)) {
				near = g
			}
			if scd > model.Geometry.SCD(Collimator(far.key)) {
				far = g
			}
		}
		ratio := ""
		if math.Abs(far.mean) > 0.02 && near.mean/far.mean > 0 {
			ratio = fmt.Sprintf(" about %.1f times as much as those of the %s", near.mean/far.mean, Collimator(far.key).Label())
		} else {
			ratio = fmt.Sprintf(" while those of the %s hardly changed", Collimator(far.key).Label())
		}
		return cause, fmt.Sprintf("edges of the %s %s%s (%s): consistent with a %s source, σ_s %s mm",
			Collimator(near.key).Label(), word, ratio, collText, size, signed(ds)), nil
	case CauseRadiological:
		dr := rad.theta[0]
		word := "widened"
		if dr < 0 {
			word = "narrowed"
		}
		return cause, fmt.Sprintf("edges of every collimator %s alike (%s): consistent with a change of beam energy or scatter, R %s mm", word, collText, signed(dr)), nil
	default:
		var at, elsewhere float64
		var nElse int
		for _, g := range bySetup {
			if g.key == bestSetup {
				at = g.mean
			} else {
				elsewhere += g.mean * float64(g.n)
				nElse += g.n
			}
		}
		if nElse > 0 {
			elsewhere /= float64(nElse)
		}
		return cause, fmt.Sprintf("the change is confined to one setup: %s mm at %s against %s mm at the others: a matter of that setup or its measurement, not of the beam", signed(at), bestSetup, signed(elsewhere)), nil
	}
}

type group struct {
	key      string
	n        int
	mean, ss float64
}

// groupMeans groups values v by key(point): count, mean and the sum of
// squares about the mean; collimators in the order of Collimators, other
// keys sorted.
func groupMeans(points []Point, v []float64, key func(Point) string) []group {
	idx := map[string]*group{}
	var order []string
	for i, p := range points {
		k := key(p)
		g := idx[k]
		if g == nil {
			g = &group{key: k}
			idx[k] = g
			order = append(order, k)
		}
		g.n++
		g.mean += v[i]
	}
	for _, g := range idx {
		g.mean /= float64(g.n)
	}
	for i, p := range points {
		d := v[i] - idx[key(p)].mean
		idx[key(p)].ss += d * d
	}
	sort.Slice(order, func(i, j int) bool {
		ci, cj := collIndex(Collimator(order[i])), collIndex(Collimator(order[j]))
		if ci != cj {
			return ci < cj
		}
		return order[i] < order[j]
	})
	out := make([]group, len(order))
	for i, k := range order {
		out[i] = *idx[k]
	}
	return out
}

// collimatorChanges is "upper jaws +0.52, lower jaws +0.33, MLC +0.25 mm".
func collimatorChanges(gs []group) string {
	parts := make([]string, len(gs))
	for i, g := range gs {
		parts[i] = Collimator(g.key).Label() + " " + signed(g.mean)
	}
	return strings.Join(parts, ", ") + " mm"
}

// signed formats a change in mm as "+0.20", never "-0.00".
func signed(v float64) string {
	v = math.Round(v*100) / 100
	if v == 0 {
		v = 0 // drop the sign of −0
	}
	return fmt.Sprintf("%+.2f", v)
}

func sumSq(v []float64) float64 {
	var s float64
	for _, x := range v {
		s += x * x
	}
	return s
}

func clamp01(v float64) float64 { return math.Max(0, math.Min(1, v)) }

// z2 is the squared z statistic of a one-parameter change along direction
// g (∂P/∂Δ at no change) from residuals e:
//
//	Δ̂ = gᵀe/gᵀg,   var(Δ̂) = s²/gᵀg + gᵀX·Cov·Xᵀg/(gᵀg)²
//
// with X the baseline model's gradient ∂P/∂(σ_s, r0[, r1]) at each point
// and Cov its covariance (the delta method: the baseline's own error moves
// every residual alike).
func z2(m Model, after []Point, mags, e []float64, s2 float64, g []float64) float64 {
	p := len(m.Cov)
	var gg, ge float64
	xg := make([]float64, p)
	for i, pt := range after {
		if g[i] == 0 {
			continue
		}
		gg += g[i] * g[i]
		ge += g[i] * e[i]
		r := m.RAt(pt.DepthCm)
		v := quadrature(m.SourceSigmaMM, r, mags[i])
		x := []float64{K8020 * K8020 * m.SourceSigmaMM * mags[i] * mags[i] / v, r / v, r * pt.DepthCm / v}
		for j := 0; j < p; j++ {
			xg[j] += g[i] * x[j]
		}
	}
	if gg == 0 {
		return 0
	}
	var q float64
	for j := 0; j < p; j++ {
		for k := 0; k < p; k++ {
			q += xg[j] * m.Cov[j][k] * xg[k]
		}
	}
	d := ge / gg
	return d * d / (s2/gg + q/(gg*gg))
}
