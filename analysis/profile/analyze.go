package profile

import (
	"fmt"
	"math"
)

// Normalisation and interpolation choices for Options.
const (
	NormaliseCAX = "cax"    // 100% = signal at the field centre (default)
	NormaliseMax = "max"    // 100% = largest signal
	InterpLinear = "linear" // straight lines between samples (default)
	InterpCubic  = "cubic"  // monotone piecewise cubic (Fritsch–Butland)
)

const (
	centreTolMM   = 1e-6 // the iterated centre is stable when it moves less than this (mm)
	maxCentreIter = 50
)

// Options selects how Analyze treats a profile. The zero value is the
// default: central-axis normalisation, linear interpolation, no smoothing,
// automatic FFF detection, an axis (not diagonal) profile.
type Options struct {
	// Normalise is NormaliseCAX ("cax", the default when empty) or
	// NormaliseMax ("max").
	Normalise string
	// Interpolation is InterpLinear ("linear", the default when empty) or
	// InterpCubic ("cubic").
	Interpolation string
	// SmoothPasses applies the 3-point smoothing kernel (see smooth.go) this
	// many times before analysis: 0 (off, the default) to MaxSmoothPasses.
	SmoothPasses int
	// FFF forces (true) or forbids (false) the flattening-filter-free
	// analysis; nil detects a peaked profile (see Result.FFF).
	FFF *bool
	// Diagonal marks a profile along the field diagonal: the flattened-region
	// margin is doubled (IEC 60976, from memory).
	Diagonal bool
}

func (o Options) validate() error {
	switch o.Normalise {
	case "", NormaliseCAX, NormaliseMax:
	default:
		return fmt.Errorf("%w: Normalise %q: use %q (central axis) or %q (maximum)", ErrOptions, o.Normalise, NormaliseCAX, NormaliseMax)
	}
	switch o.Interpolation {
	case "", InterpLinear, InterpCubic:
	default:
		return fmt.Errorf("%w: Interpolation %q: use %q or %q", ErrOptions, o.Interpolation, InterpLinear, InterpCubic)
	}
	if o.SmoothPasses < 0 || o.SmoothPasses > MaxSmoothPasses {
		return fmt.Errorf("%w: SmoothPasses %d: use 0 (off) to %d", ErrOptions, o.SmoothPasses, MaxSmoothPasses)
	}
	return nil
}

// Result is the analysis of one profile. Positions are in mm in the input's
// coordinates; percentages are of the normalisation signal unless said
// otherwise. Flatness and symmetry are taken over the flattened region (see
// FlattenedRegionMM), centred on the field centre.
type Result struct {
	// FieldSizeMM = RightEdgeMM − LeftEdgeMM: the distance between the 50%
	// points (IEC 60976, from memory), or between the inflection points for
	// an FFF profile (Fogliata et al. 2012).
	FieldSizeMM float64 `json:"field_size_mm"`
	// CentreMM = (LeftEdgeMM + RightEdgeMM)/2, the field centre (common
	// practice); its offset from 0 is the centre offset.
	CentreMM    float64 `json:"centre_mm"`
	LeftEdgeMM  float64 `json:"left_edge_mm"`
	RightEdgeMM float64 `json:"right_edge_mm"`
	// Penumbra is the distance between the 80% and 20% points of each edge
	// (IEC 60976, from memory); for FFF, of the renormalised profile.
	LeftPenumbraMM  float64 `json:"left_penumbra_mm"`
	RightPenumbraMM float64 `json:"right_penumbra_mm"`
	Left20MM        float64 `json:"left_20_mm"`
	Left80MM        float64 `json:"left_80_mm"`
	Right80MM       float64 `json:"right_80_mm"`
	Right20MM       float64 `json:"right_20_mm"`

	// FlatnessPct = 100·(Dmax − Dmin)/(Dmax + Dmin) over the flattened
	// region: the common point-difference form (common practice). For an FFF
	// profile both flatness forms are computed the same way but mean little;
	// FFF.Unflatness is the figure to follow.
	FlatnessPct float64 `json:"flatness_pct"`
	// FlatnessIECPct = 100·Dmax/Dmin over the flattened region: the IEC 60976
	// form (from memory), ≥ 100.
	FlatnessIECPct float64 `json:"flatness_iec_pct"`
	// SymmetryPct = 100·max|D(c+u) − D(c−u)|/D(c) over the flattened region:
	// the common point-difference form (common practice), ≥ 0.
	SymmetryPct float64 `json:"symmetry_pct"`
	// SymmetryIECPct = 100·max(D(c+u)/D(c−u), D(c−u)/D(c+u)) over the
	// flattened region: the IEC 60976 form (from memory), ≥ 100.
	SymmetryIECPct float64 `json:"symmetry_iec_pct"`
	// SymmetryAreaPct = 100·(A_L − A_R)/(A_L + A_R), the areas under the
	// profile left and right of the centre within the flattened region
	// (common practice); signed, positive when the left half holds more.
	SymmetryAreaPct float64 `json:"symmetry_area_pct"`
	// FlattenedRegionMM is [centre − (F/2 − d_m), centre + (F/2 − d_m)].
	FlattenedRegionMM [2]float64 `json:"flattened_region_mm"`

	// Normalisation is NormaliseCAX or NormaliseMax; NormalisationSignal is
	// the input signal taken as 100%.
	Normalisation       string  `json:"normalisation"`
	NormalisationSignal float64 `json:"normalisation_signal"`
	Interpolation       string  `json:"interpolation"`
	SmoothPasses        int     `json:"smooth_passes"`
	// Samples is the number of distinct positions analysed (repeats merged).
	Samples int `json:"samples"`
	// Method says in words how the edges were found, e.g. "50% of CAX, linear
	// interpolation" or "FFF: Hill-fit inflection, renormalised, ...".
	Method string `json:"method"`
	// FFF holds the flattening-filter-free parameters; nil for a flattened
	// beam.
	FFF      *FFFResult `json:"fff,omitempty"`
	Warnings []string   `json:"warnings,omitempty"`
}

// Analyze finds the edges, field size, centre, penumbra, flatness and
// symmetry of a profile. Samples may come in any order and spacing; repeated
// positions are averaged. It needs at least MinSamples distinct positions
// and a profile that falls below 50% (20% for the penumbra) on both sides of
// its centre.
//
// Edges (flattened beam): with Normalise "cax" the 50% level is half the
// signal at the field centre, found iteratively — centre from the 50%
// points, re-normalise at that centre, repeat until the centre moves less
// than 1e-6 mm; with "max" it is half the largest signal. Crossings are
// interpolated between samples, searching outward from the centre.
//
// Edges (FFF): see analyzeFFF. A profile is treated as FFF when Options.FFF
// says so or, if it is nil, when the 50% field is at least 60 mm wide and
// D(c)/D(c ± 0.4·F) ≥ 1.05 on both sides (peakedness test; see looksFFF).
func Analyze(samples []Sample, opt Options) (Result, error) {
	if err := opt.validate(); err != nil {
		return Result{}, err
	}
	c, err := newCurve(samples)
	if err != nil {
		return Result{}, err
	}
	c.smooth(opt.SmoothPasses)
	res := Result{
		Normalisation: NormaliseCAX,
		Interpolation: InterpLinear,
		SmoothPasses:  opt.SmoothPasses,
		Samples:       len(c.x),
	}
	if opt.Normalise == NormaliseMax {
		res.Normalisation = NormaliseMax
	}
	if opt.Interpolation == InterpCubic {
		res.Interpolation = InterpCubic
		c.fitCubic()
	}
	useMax := res.Normalisation == NormaliseMax
	half, err := c.halfEdges(useMax, &res.Warnings)
	if err != nil {
		return Result{}, err
	}
	if err := c.checkTwoEdges(half); err != nil {
		return Result{}, err
	}
	fff, detected := false, false
	if opt.FFF != nil {
		fff = *opt.FFF
	} else {
		fff = c.looksFFF(half, &res.Warnings)
		detected = fff
	}
	if fff {
		err = c.analyzeFFF(half, useMax, detected, &res)
	} else {
		err = c.analyzeFlattened(half, &res)
	}
	if err != nil {
		return Result{}, err
	}
	if err := c.flatnessSymmetry(&res, opt.Diagonal); err != nil {
		return Result{}, err
	}
	res.Method = methodText(res, fff, detected)
	if err := res.checkFinite(); err != nil {
		return Result{}, err
	}
	return res, nil
}

// checkFinite guards against a profile whose dynamic range overflows a
// ratio (e.g. a spike 1e300 times the field): such a result cannot be
// stored or sent as JSON.
func (r *Result) checkFinite() error {
	values := []float64{r.FieldSizeMM, r.LeftPenumbraMM, r.RightPenumbraMM, r.FlatnessPct, r.FlatnessIECPct,
		r.SymmetryPct, r.SymmetryIECPct, r.SymmetryAreaPct, r.NormalisationSignal}
	if r.FFF != nil {
		f := r.FFF
		values = append(values, f.LeftRenormalisation, f.RightRenormalisation, f.Unflatness,
			f.LeftSlopePctPerMM, f.RightSlopePctPerMM, f.PeakMM, f.LeftFit.RMS, f.RightFit.RMS)
	}
	for _, v := range values {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("%w: the signal's dynamic range is too large to analyse (a result came out as %g); check for spikes or a unit error", ErrNotFinite, v)
		}
	}
	return nil
}

// halfMax is the outcome of the 50% search.
type halfMax struct {
	left, right, centre float64 // mm
	norm                float64 // signal taken as 100%
	start               int     // sample index nearest the centre
}

// halfEdges finds the 50% edges. With useMax the level is half the largest
// signal; otherwise the normalisation is iterated to the signal at the field
// centre.
func (c *curve) halfEdges(useMax bool, warnings *[]string) (halfMax, error) {
	start, peak := c.argmax()
	h := halfMax{norm: peak, start: start, centre: c.x[start]}
	for it := 0; ; it++ {
		level := 0.5 * h.norm
		l, ok := c.crossOut(level, h.start, -1)
		if !ok {
			return halfMax{}, c.noCrossing("50%", -1, level, h.centre)
		}
		r, ok := c.crossOut(level, h.start, 1)
		if !ok {
			return halfMax{}, c.noCrossing("50%", 1, level, h.centre)
		}
		centre := 0.5 * (l + r)
		if useMax {
			h.left, h.right, h.centre, h.start = l, r, centre, c.nearest(centre)
			return h, nil
		}
		norm := c.at(centre)
		if !(norm > 0) {
			return halfMax{}, fmt.Errorf("%w: the signal at the field centre (%g mm) is %g; the field between the 50%% points must carry positive signal", ErrNoSignal, centre, norm)
		}
		moved := math.Abs(centre - h.centre)
		stable := it > 0 && moved < centreTolMM && math.Abs(norm-h.norm) <= 1e-12*norm
		h.left, h.right, h.centre, h.norm, h.start = l, r, centre, norm, c.nearest(centre)
		if stable {
			return h, nil
		}
		if it == maxCentreIter {
			*warnings = append(*warnings, fmt.Sprintf("the field centre did not settle after %d re-normalisations (last move %.2g mm)", maxCentreIter, moved))
			return h, nil
		}
	}
}

// minFieldSamples is the fewest samples between the two 50% points, and
// minTailSamples the fewest consecutive samples below 50% just outside each
// of them, for the profile to show a field with two edges rather than a
// spike or a one-sample dip (common practice: an edge is a sustained fall).
const (
	minFieldSamples = 2
	minTailSamples  = 2
)

// checkTwoEdges refuses a profile whose 50% points do not bound a field:
// fewer than minFieldSamples samples between them, or a side where the
// signal does not stay below 50% for minTailSamples samples beyond the
// crossing (a single low sample, or the scan's last sample).
func (c *curve) checkTwoEdges(h halfMax) error {
	level := 0.5 * h.norm
	inside := 0
	for _, x := range c.x {
		if x > h.left && x < h.right {
			inside++
		}
	}
	if inside < minFieldSamples {
		return fmt.Errorf("%w: only %d sample(s) lie between the 50%% points at %g and %g mm: a spike, not a field; scan across the whole field", ErrNoField, inside, h.left, h.right)
	}
	tail := func(edge float64, dir int) error {
		i := 0
		if dir < 0 {
			i = len(c.x) - 1
			for i >= 0 && c.x[i] >= edge {
				i--
			}
		} else {
			for i < len(c.x) && c.x[i] <= edge {
				i++
			}
		}
		side := map[int]string{-1: "left", 1: "right"}[dir]
		for k := 0; k < minTailSamples; k++ {
			j := i + dir*k
			if j < 0 || j >= len(c.x) {
				return fmt.Errorf("%w: the %s edge at %g mm is the end of the scan: the signal must stay below 50%% for at least %d samples beyond an edge; extend the scan past the field", ErrNoField, side, edge, minTailSamples)
			}
			if c.y[j] >= level {
				return fmt.Errorf("%w: on the %s the signal dips below 50%% at %g mm but is back to %.4g (above %.4g) at %g mm: a dip, not a field edge; check the profile for dropouts", ErrNoField, side, edge, c.y[j], level, c.x[j])
			}
		}
		return nil
	}
	if err := tail(h.left, -1); err != nil {
		return err
	}
	return tail(h.right, 1)
}

// noCrossing is the error for a level that the profile, followed outward
// from position from (mm) in direction dir, never falls below.
func (c *curve) noCrossing(label string, dir int, level, from float64) error {
	side, end := "left", c.x[0]
	if dir > 0 {
		side, end = "right", c.x[len(c.x)-1]
	}
	return fmt.Errorf("%w: no %s crossing on the %s: going out from %g mm the signal never falls below %.4g before the last sample at %g mm; extend the scan past the field edge or check the background",
		ErrNoCrossing, label, side, from, level, end)
}

// analyzeFlattened sets the 50% edges and the 80% and 20% points of a
// flattened beam.
func (c *curve) analyzeFlattened(h halfMax, res *Result) error {
	res.LeftEdgeMM, res.RightEdgeMM = h.left, h.right
	res.CentreMM, res.FieldSizeMM = h.centre, h.right-h.left
	res.NormalisationSignal = h.norm
	points := [4]struct {
		dst  *float64
		frac float64
		dir  int
	}{{&res.Left80MM, 0.8, -1}, {&res.Left20MM, 0.2, -1}, {&res.Right80MM, 0.8, 1}, {&res.Right20MM, 0.2, 1}}
	for _, p := range points {
		x, ok := c.crossOut(p.frac*h.norm, h.start, p.dir)
		if !ok {
			return c.noCrossing(fmt.Sprintf("%.0f%%", 100*p.frac), p.dir, p.frac*h.norm, h.centre)
		}
		*p.dst = x
	}
	res.LeftPenumbraMM = res.Left80MM - res.Left20MM
	res.RightPenumbraMM = res.Right20MM - res.Right80MM
	return nil
}

func methodText(res Result, fff, detected bool) string {
	interp := "linear interpolation"
	if res.Interpolation == InterpCubic {
		interp = "monotone cubic interpolation"
	}
	var s string
	switch {
	case fff && detected:
		s = "FFF: Hill-fit inflection, renormalised (peaked profile detected), " + interp
	case fff:
		s = "FFF: Hill-fit inflection, renormalised, " + interp
	case res.Normalisation == NormaliseMax:
		s = "50% of maximum, " + interp
	default:
		s = "50% of CAX, " + interp
	}
	if res.SmoothPasses > 0 {
		s += fmt.Sprintf(", 3-point smoothing ×%d", res.SmoothPasses)
	}
	return s
}
