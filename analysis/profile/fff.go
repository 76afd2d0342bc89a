package profile

import (
	"fmt"
	"math"
	"slices"
)

// FFF detection and fitting constants.
const (
	// fffMinUnflatness: a profile is peaked when D(c)/D(c ± 0.4·F) reaches
	// this on both sides. Flattened beams stay near 1.00 (horns push it
	// below); 6 MV FFF 10×10 cm is about 1.11 (Clivio et al., "On the
	// determination of reference levels for quality assurance of flattening
	// filter free photon beams in radiotherapy", Med Phys 41:021713, 2014 —
	// value seen, authors and volume from memory).
	fffMinUnflatness = 1.05
	// fffMinFieldMM: below this 50% field size the penumbra itself lowers
	// D(c ± 0.4·F), so a peaked profile is not called FFF automatically.
	fffMinFieldMM = 60
	// steepChordMM is the shortest chord used to find the steepest point of
	// an edge, so that noise between close samples does not win.
	steepChordMM = 1.0
	// fitWidths: the Hill fit window runs from the estimated 80% point to
	// the estimated 20% point, widened by this many estimated penumbra widths
	// on each side.
	fitWidths = 1.5
	// fallbackHalfWindowMM is the fit half-window when the estimated 80% or
	// 20% point cannot be found.
	fallbackHalfWindowMM = 10.0
	// minFitSamples: the window is widened until it holds this many samples.
	minFitSamples = 8
)

// FFFResult holds the flattening-filter-free parameters (Fogliata et al., Med
// Phys 39:6455, 2012 — method from memory). Percentages are of
// the normalisation signal unless marked renormalised.
type FFFResult struct {
	// Detected is true when the peakedness test chose the FFF analysis and
	// false when Options.FFF forced it.
	Detected bool `json:"detected"`
	// InflectionPct is the fitted signal at each inflection point (the field
	// edge), in % of the normalisation signal.
	LeftInflectionPct  float64 `json:"left_inflection_pct"`
	RightInflectionPct float64 `json:"right_inflection_pct"`
	// Renormalisation is the factor 50/InflectionPct that maps the profile (in
	// %) to the renormalised profile, in which the inflection point sits at
	// 50%; the penumbra is its 80%–20% distance, i.e. between 1.6× and 0.4×
	// the inflection signal. Each edge uses its own factor.
	LeftRenormalisation  float64 `json:"left_renormalisation"`
	RightRenormalisation float64 `json:"right_renormalisation"`
	// Unflatness = D(c)/D(c ∓ 0.4·F): the centre signal over the signal at 80%
	// of the field size (from memory). Unflatness is the mean of the sides.
	UnflatnessLeft  float64 `json:"unflatness_left"`
	UnflatnessRight float64 `json:"unflatness_right"`
	Unflatness      float64 `json:"unflatness"`
	// SlopePctPerMM is the least-squares slope of the renormalised profile on
	// each shoulder, between 1/3 and 2/3 of the half field (|x − c| from F/6
	// to F/3), in renormalised % per mm, positive when the profile falls
	// away from the centre (definition from memory).
	LeftSlopePctPerMM  float64 `json:"left_slope_pct_per_mm"`
	RightSlopePctPerMM float64 `json:"right_slope_pct_per_mm"`
	// PeakMM is the position of the profile maximum: the vertex of a
	// least-squares parabola through the samples within F/4 of it, the
	// window starting at the field centre and following the vertex (the
	// largest sample there if the parabola is not concave).
	PeakMM float64 `json:"peak_mm"`
	// FitOriginMM is the origin from which the Hill fits measure distance
	// (the centre of the 50% search); LeftFit and RightFit have C in mm from
	// it and A, B in % of the normalisation signal of that search.
	FitOriginMM float64 `json:"fit_origin_mm"`
	LeftFit     HillFit `json:"left_fit"`
	RightFit    HillFit `json:"right_fit"`
}

// looksFFF is the peakedness test: the profile is FFF when D(c)/D(c ± 0.4·F)
// ≥ 1.05 on both sides and the 50% field is at least 60 mm wide.
func (c *curve) looksFFF(h halfMax, warnings *[]string) bool {
	field := h.right - h.left
	l, r := c.unflatness(h.centre, field)
	peaked := l >= fffMinUnflatness && r >= fffMinUnflatness
	if peaked && field < fffMinFieldMM {
		*warnings = append(*warnings, fmt.Sprintf("the profile is peaked (D(c)/D(c±0.4F) = %.3f, %.3f) but the field (%.1f mm) is below %d mm, where the test is unreliable; analysed as flattened — set Options.FFF if the beam is FFF", l, r, field, fffMinFieldMM))
		return false
	}
	return peaked
}

// unflatness returns D(c)/D(c − 0.4·F) and D(c)/D(c + 0.4·F), or 0 for a
// side whose signal is not positive.
func (c *curve) unflatness(centre, field float64) (left, right float64) {
	d0 := c.at(centre)
	ratio := func(x float64) float64 {
		if d := c.at(x); d > 0 {
			return d0 / d
		}
		return 0
	}
	return ratio(centre - 0.4*field), ratio(centre + 0.4*field)
}

// analyzeFFF locates each edge at the inflection point of a Hill function
// fitted to it (fitEdge), then reports the penumbra of the renormalised
// profile — the distance between the points at 1.6× and 0.4× the inflection
// signal — and the unflatness, shoulder slopes and peak position.
func (c *curve) analyzeFFF(h halfMax, useMax, detected bool, res *Result) error {
	left, err := c.fitEdge(h, -1)
	if err != nil {
		return err
	}
	right, err := c.fitEdge(h, 1)
	if err != nil {
		return err
	}
	centre, field := 0.5*(left.x+right.x), right.x-left.x
	if !(field > 0) {
		return fmt.Errorf("%w: the left inflection (%g mm) is not left of the right one (%g mm)", ErrFit, left.x, right.x)
	}
	res.LeftEdgeMM, res.RightEdgeMM, res.CentreMM, res.FieldSizeMM = left.x, right.x, centre, field
	start := c.nearest(centre)
	norm := h.norm
	if !useMax {
		norm = c.at(centre)
		if !(norm > 0) {
			return fmt.Errorf("%w: the signal at the field centre (%g mm) is %g", ErrNoSignal, centre, norm)
		}
	}
	res.NormalisationSignal = norm

	points := [4]struct {
		dst    *float64
		signal float64
		frac   float64
		dir    int
	}{{&res.Left80MM, left.signal, 1.6, -1}, {&res.Left20MM, left.signal, 0.4, -1},
		{&res.Right80MM, right.signal, 1.6, 1}, {&res.Right20MM, right.signal, 0.4, 1}}
	for _, p := range points {
		x, ok := c.crossOut(p.frac*p.signal, start, p.dir)
		if !ok {
			return c.noCrossing(fmt.Sprintf("renormalised %.0f%% (%.1f× inflection)", 50*p.frac, p.frac), p.dir, p.frac*p.signal, centre)
		}
		*p.dst = x
	}
	res.LeftPenumbraMM = res.Left80MM - res.Left20MM
	res.RightPenumbraMM = res.Right20MM - res.Right80MM

	f := &FFFResult{
		Detected:           detected,
		LeftInflectionPct:  100 * left.signal / norm,
		RightInflectionPct: 100 * right.signal / norm,
		FitOriginMM:        h.centre,
		LeftFit:            left.fit,
		RightFit:           right.fit,
	}
	f.LeftRenormalisation = 50 / f.LeftInflectionPct
	f.RightRenormalisation = 50 / f.RightInflectionPct
	f.UnflatnessLeft, f.UnflatnessRight = c.unflatness(centre, field)
	f.Unflatness = 0.5 * (f.UnflatnessLeft + f.UnflatnessRight)
	// Renormalised % per signal unit on each side: 100/norm · 50/InflectionPct.
	f.LeftSlopePctPerMM = c.lsqSlope(centre-field/3, centre-field/6) * 100 / norm * f.LeftRenormalisation
	f.RightSlopePctPerMM = -c.lsqSlope(centre+field/6, centre+field/3) * 100 / norm * f.RightRenormalisation
	f.PeakMM = c.peakNear(centre, field/4)
	res.FFF = f
	return nil
}

// edgeFit is one FFF edge.
type edgeFit struct {
	x      float64 // inflection position, mm
	signal float64 // fitted signal at the inflection, input units
	fit    HillFit // u in mm from h.centre, y in % of h.norm
}

// fitEdge fits the Hill function to the edge on side dir (−1 left, +1 right)
// of the centre h.centre, with u = |x − h.centre|. The window is found from
// the steepest chord of the edge: its signal v estimates the inflection
// signal, the crossings of 1.6·v and 0.4·v estimate the 80% and 20% points,
// and the window spans them widened by fitWidths penumbra widths each side
// (at least minFitSamples samples, never nearer the centre than half the
// edge distance).
func (c *curve) fitEdge(h halfMax, dir int) (edgeFit, error) {
	side := "left"
	if dir > 0 {
		side = "right"
	}
	i, j, slope := c.steepest(h.start, dir)
	if i < 0 || !(slope > 0) {
		return edgeFit{}, fmt.Errorf("%w: no falling edge on the %s of %g mm", ErrFit, side, h.centre)
	}
	uEdge := float64(dir) * (0.5*(c.x[i]+c.x[j]) - h.centre)
	v := 0.5 * (c.y[i] + c.y[j])
	inner, outer := uEdge-fallbackHalfWindowMM, uEdge+fallbackHalfWindowMM
	if x80, ok := c.crossOut(1.6*v, h.start, dir); ok {
		if x20, ok := c.crossOut(0.4*v, h.start, dir); ok {
			w := math.Abs(x20 - x80)
			inner = float64(dir)*(x80-h.centre) - fitWidths*w
			outer = float64(dir)*(x20-h.centre) + fitWidths*w
		}
	}
	inner = max(inner, 0.5*uEdge)

	// Sample index ranges: [a, b] the window, [lim0, lim1] what it may grow to.
	var a, b, lim0, lim1 int
	if dir < 0 {
		near, _ := slices.BinarySearch(c.x, h.centre-0.5*uEdge) // first sample inside the inner limit
		lim0, lim1 = 0, near-1
		a, _ = slices.BinarySearch(c.x, h.centre-outer)
		b, _ = slices.BinarySearch(c.x, h.centre-inner)
	} else {
		lim0, _ = slices.BinarySearch(c.x, h.centre+0.5*uEdge)
		lim1 = len(c.x) - 1
		a, _ = slices.BinarySearch(c.x, h.centre+inner)
		b, _ = slices.BinarySearch(c.x, h.centre+outer)
	}
	b-- // last sample before the window's far end
	a, b = max(a, lim0), min(b, lim1)
	for b-a+1 < minFitSamples && (a > lim0 || b < lim1) {
		if a > lim0 {
			a--
		}
		if b < lim1 {
			b++
		}
	}
	if b-a+1 < minHillPoints {
		return edgeFit{}, fmt.Errorf("%w: only %d samples on the %s edge near %g mm; the Hill fit needs %d — sample the penumbra more finely", ErrFit, max(b-a+1, 0), side, h.centre+float64(dir)*uEdge, minHillPoints)
	}

	n := b - a + 1
	buf := make([]float64, 2*n)
	u, y := buf[:n], buf[n:]
	for k := range n {
		u[k] = float64(dir) * (c.x[a+k] - h.centre)
		y[k] = 100 * c.y[a+k] / h.norm
	}
	innerK, outerK := 0, n-1 // samples nearest and farthest from the centre
	if dir < 0 {
		innerK, outerK = n-1, 0
	}
	guess := Hill{A: y[innerK], B: y[outerK], C: uEdge}
	guess.D = min(max(4*uEdge*(100*slope/h.norm)/math.Abs(guess.A-guess.B), 2), 500)
	if !(guess.A > guess.B) {
		return edgeFit{}, fmt.Errorf("%w: the %s edge window [%g, %g] mm does not fall away from the centre", ErrFit, side, c.x[a], c.x[b])
	}
	fit, err := FitHill(u, y, guess)
	if err != nil {
		return edgeFit{}, fmt.Errorf("%w (%s edge near %g mm)", err, side, h.centre+float64(dir)*uEdge)
	}
	ui, fi := fit.Inflection()
	if !(fit.A > fit.B) || !(fi > 0) || ui < min(u[0], u[n-1]) || ui > max(u[0], u[n-1]) {
		return edgeFit{}, fmt.Errorf("%w: the %s edge fit is implausible (shoulder %.3g%%, tail %.3g%%, inflection %.3g mm from the centre, outside the fitted %.3g–%.3g mm or below zero); check the profile or analyse it as flattened",
			ErrFit, side, fit.A, fit.B, ui, min(u[0], u[n-1]), max(u[0], u[n-1]))
	}
	return edgeFit{x: h.centre + float64(dir)*ui, signal: fi * h.norm / 100, fit: fit}, nil
}

// steepest returns the chord (samples i < j, at least steepChordMM apart
// where the samples allow) on side dir of sample start along which the
// profile falls fastest away from the centre, and that fall in signal per
// mm. i is −1 if the side has fewer than two samples.
func (c *curve) steepest(start, dir int) (i, j int, slope float64) {
	lo, hi := 0, start
	if dir > 0 {
		lo, hi = start, len(c.x)-1
	}
	i, j, slope = -1, -1, math.Inf(-1)
	k := lo
	for s := lo; s < hi; s++ {
		k = max(k, s+1)
		for k < hi && c.x[k]-c.x[s] < steepChordMM {
			k++
		}
		if fall := -float64(dir) * (c.y[k] - c.y[s]) / (c.x[k] - c.x[s]); fall > slope {
			i, j, slope = s, k, fall
		}
	}
	return i, j, slope
}

// lsqSlope returns the least-squares slope dD/dx (signal per mm) of the
// samples in [a, b], or the chord between the interpolated ends when fewer
// than three samples lie there.
func (c *curve) lsqSlope(a, b float64) float64 {
	i, _ := slices.BinarySearch(c.x, a)
	mid := 0.5 * (a + b)
	var n, st, sy, stt, sty float64
	for ; i < len(c.x) && c.x[i] <= b; i++ {
		t := c.x[i] - mid
		n++
		st += t
		sy += c.y[i]
		stt += t * t
		sty += t * c.y[i]
	}
	if n < 3 {
		return (c.at(b) - c.at(a)) / (b - a)
	}
	return (n*sty - st*sy) / (n*stt - st*st)
}

// peakNear returns the position of the profile maximum: the vertex of a
// least-squares parabola through the samples within halfWidth (mm) of a
// window centre that starts at centre and moves to the vertex, so that an
// asymmetric window does not pull the vertex of a non-parabolic peak
// (at most 5 moves, stopping when the vertex moves less than 1 µm).
func (c *curve) peakNear(centre, halfWidth float64) float64 {
	p := centre
	for range 5 {
		next := c.peak(p-halfWidth, p+halfWidth)
		if math.Abs(next-p) < 1e-3 {
			return next
		}
		p = next
	}
	return p
}

// peak returns the position of the maximum within [a, b]: the vertex of the
// least-squares parabola through the samples there when it is concave with
// its vertex inside, else the largest sample there (or anywhere, if none).
func (c *curve) peak(a, b float64) float64 {
	i0, _ := slices.BinarySearch(c.x, a)
	i1 := i0
	for i1 < len(c.x) && c.x[i1] <= b {
		i1++
	}
	if i1 == i0 {
		i, _ := c.argmax()
		return c.x[i]
	}
	best := i0
	mid, hw := 0.5*(a+b), 0.5*(b-a)
	// Normal equations in s = (x − mid)/hw ∈ [−1, 1]: S_k = Σ s^k, T_k = Σ s^k·y.
	var s0, s1, s2, s3, s4, t0, t1, t2 float64
	for i := i0; i < i1; i++ {
		if c.y[i] > c.y[best] {
			best = i
		}
		s := (c.x[i] - mid) / hw
		ss := s * s
		s0++
		s1 += s
		s2 += ss
		s3 += ss * s
		s4 += ss * ss
		t0 += c.y[i]
		t1 += s * c.y[i]
		t2 += ss * c.y[i]
	}
	// Solve [s4 s3 s2; s3 s2 s1; s2 s1 s0]·(p2, p1, p0) = (t2, t1, t0) by
	// Cramer's rule; only p2 and p1 are needed for the vertex.
	det := s4*(s2*s0-s1*s1) - s3*(s3*s0-s1*s2) + s2*(s3*s1-s2*s2)
	if i1-i0 >= 3 && det != 0 {
		p2 := (t2*(s2*s0-s1*s1) - s3*(t1*s0-s1*t0) + s2*(t1*s1-s2*t0)) / det
		p1 := (s4*(t1*s0-s1*t0) - t2*(s3*s0-s1*s2) + s2*(s3*t0-t1*s2)) / det
		if v := -p1 / (2 * p2); p2 < 0 && math.Abs(v) <= 1 {
			return mid + v*hw
		}
	}
	return c.x[best]
}
