package epid

import (
	"fmt"
	"math"
)

// FieldOptions tune AnalyzeField. Zero values take the defaults.
type FieldOptions struct {
	// BandMM is the width (mm at the isocentre) of the band of rows or
	// columns averaged into each profile. Default 5 mm.
	BandMM float64
	// CentralMM is the half-width (mm) of the window around the field centre
	// whose mean is the central value, clipped to a quarter of the field
	// width. Default 2.5 mm.
	CentralMM float64
	// AbsoluteLevels takes the 50/80/20% levels as fractions of the central
	// value itself, the IEC 60976 definition for a dose profile (from memory).
	// By default they are fractions of (central − background), which removes
	// the imager's dark offset and the collimator transmission floor.
	AbsoluteLevels bool
	// Invert says how to decide whether the greyscale is inverted.
	Invert InvertMode
	// RotationBands is the number of bands, spread over the central 60% of
	// each edge, in which the edge is located to fit its angle. Default 7,
	// minimum 3.
	RotationBands int
	// RotationWarnDeg: a field rotated more than this (degrees) from the
	// image axes gives a warning. Default 0.5°.
	RotationWarnDeg float64
}

func (o FieldOptions) withDefaults() (FieldOptions, error) {
	for _, f := range []struct {
		name string
		v    float64
	}{{"BandMM", o.BandMM}, {"CentralMM", o.CentralMM}, {"RotationWarnDeg", o.RotationWarnDeg}} {
		if f.v < 0 || math.IsNaN(f.v) || math.IsInf(f.v, 0) {
			return o, fmt.Errorf("%w: FieldOptions.%s = %g; give a positive value or 0 for the default", ErrInvalidOption, f.name, f.v)
		}
	}
	if o.RotationBands < 0 || o.RotationBands == 1 || o.RotationBands == 2 {
		return o, fmt.Errorf("%w: FieldOptions.RotationBands = %d; give at least 3, or 0 for the default 7", ErrInvalidOption, o.RotationBands)
	}
	if o.BandMM == 0 {
		o.BandMM = 5
	}
	if o.CentralMM == 0 {
		o.CentralMM = 2.5
	}
	if o.RotationBands == 0 {
		o.RotationBands = 7
	}
	if o.RotationWarnDeg == 0 {
		o.RotationWarnDeg = 0.5
	}
	return o, nil
}

// Edge names used as keys of FieldResult maps.
const (
	EdgeX1 = "X1"
	EdgeX2 = "X2"
	EdgeY1 = "Y1"
	EdgeY2 = "Y2"
)

// FieldResult holds the measured field. Distances are in mm in the isocentre
// plane (see the package documentation for the axes).
type FieldResult struct {
	// Perpendicular distance from the central axis to each edge's 50% line,
	// positive when the edge lies on its own side of the axis.
	X1MM float64 `json:"x1_mm"`
	X2MM float64 `json:"x2_mm"`
	Y1MM float64 `json:"y1_mm"`
	Y2MM float64 `json:"y2_mm"`
	// Field size between the 50% lines: X1 + X2 and Y1 + Y2.
	FieldXMM float64 `json:"field_x_mm"`
	FieldYMM float64 `json:"field_y_mm"`
	// Field centre offset from the axis: (X2 − X1)/2 toward X2, (Y2 − Y1)/2 toward Y2.
	CentreXMM float64 `json:"centre_x_mm"`
	CentreYMM float64 `json:"centre_y_mm"`
	// PenumbraMM is the 80%–20% distance of each edge, perpendicular to it.
	PenumbraMM map[string]float64 `json:"penumbra_mm"`
	// RotationDeg is the mean angle of the four edges relative to the image
	// axes, counter-clockwise positive as displayed (x right, y up).
	// EdgeAngleDeg gives each edge's own angle.
	RotationDeg  float64            `json:"rotation_deg"`
	EdgeAngleDeg map[string]float64 `json:"edge_angle_deg"`

	GantryDeg     *float64 `json:"gantry_deg,omitempty"`
	CollimatorDeg *float64 `json:"collimator_deg,omitempty"`
	// Inverted is true when the stored values were flipped because the
	// greyscale falls as dose rises.
	Inverted     bool    `json:"inverted"`
	PixelSizeXMM float64 `json:"pixel_size_x_mm"` // column pitch at the isocentre
	PixelSizeYMM float64 `json:"pixel_size_y_mm"` // row pitch at the isocentre
	AxisSource   string  `json:"axis_source"`
	// Geometry is what the decoder read and used to place the image and
	// name its edges (nil for images not decoded from DICOM).
	Geometry *GeometryUsed `json:"geometry_used,omitempty"`
	// CentralValue and Background are the crossline profile's central value
	// and background (mean of its lowest 10%), in signal units.
	CentralValue float64  `json:"central_value"`
	Background   float64  `json:"background"`
	Warnings     []string `json:"warnings"`
}

// profileEdges are the fractional sample indices of the level crossings on
// the low-index (lo) and high-index (hi) sides of one profile.
type profileEdges struct {
	lo50, lo80, lo20 float64
	hi50, hi80, hi20 float64
	central, bg      float64
}

// span is a coarse 50% extent of a projection profile, in fractional samples.
type span struct{ lo, hi float64 }

func (s span) mid() float64   { return (s.lo + s.hi) / 2 }
func (s span) width() float64 { return s.hi - s.lo }

// AnalyzeField measures a rectangular (jaw-defined) field:
//
//  1. The greyscale is oriented so the signal rises with dose (InvertMode).
//  2. The mean of every column and of every row (one pass) gives a coarse
//     50% extent and so the field centre; profiles then run through the field
//     centre, so half-beam fields work.
//  3. The crossline profile (mean of the rows within BandMM around the field
//     centre, along the columns = x) and the inline profile (columns, along
//     the rows = y) are normalised to the central value C (mean within
//     CentralMM of the field centre) above the background B (mean of the
//     lowest 10% of the profile): level(f) = B + f·(C − B).
//  4. Each edge is the first crossing of the 50% level walking out from the
//     centre, by linear interpolation between samples; the penumbra is the
//     distance between the 80% and 20% crossings (IEC 60976, from memory;
//     physics.md).
//  5. Each edge is also located in RotationBands bands along its length; a
//     least-squares line through those points gives its angle θ.
//  6. Jaw distances are the perpendicular distances from the axis to each
//     edge line: for X2, x·cosθ + y·sinθ at the measured point (x, y);
//     penumbrae are scaled by cosθ.
//
// A rotation beyond RotationWarnDeg, edges that are not parallel, or a
// non-zero collimator angle tag each add a warning.
func AnalyzeField(img Image, o FieldOptions) (FieldResult, error) {
	if err := img.Validate(); err != nil {
		return FieldResult{}, err
	}
	o, err := o.withDefaults()
	if err != nil {
		return FieldResult{}, err
	}
	flip, warn, err := decideFlip(img, o.Invert)
	if err != nil {
		return FieldResult{}, err
	}
	s := newSignal(img, flip)
	sx, sy := img.PixelSizeIsoMM()
	ar, ac, axisSrc := img.Axis()

	colMean := make([]float64, img.Cols)
	rowMean := make([]float64, img.Rows)
	scratch := make([]float64, 0, max(img.Rows, img.Cols))
	projections(img, s, colMean, rowMean)
	cx, err := coarseSpan(colMean, scratch, "X (columns)")
	if err != nil {
		return FieldResult{}, err
	}
	cy, err := coarseSpan(rowMean, scratch, "Y (rows)")
	if err != nil {
		return FieldResult{}, err
	}

	// Final profiles through the field centre.
	hbR, hbC := halfBand(o.BandMM, sy), halfBand(o.BandMM, sx)
	fr, fc := int(math.Round(cy.mid())), int(math.Round(cx.mid()))
	r0, r1 := max(fr-hbR, 0), min(fr+hbR, img.Rows-1)
	c0, c1 := max(fc-hbC, 0), min(fc+hbC, img.Cols-1)
	cross := make([]float64, img.Cols)
	inl := make([]float64, img.Rows)
	rowBandMean(img, s, r0, r1, cross)
	colBandMean(img, s, c0, c1, inl)
	xe, err := measureProfile(cross, fc, cx.width(), sx, o, scratch, EdgeX1, EdgeX2)
	if err != nil {
		return FieldResult{}, err
	}
	ye, err := measureProfile(inl, fr, cy.width(), sy, o, scratch, EdgeY2, EdgeY1)
	if err != nil {
		return FieldResult{}, err
	}
	scale := valueScale(img)
	for _, e := range []struct {
		axis string
		pe   profileEdges
	}{{"X (crossline)", xe}, {"Y (inline)", ye}} {
		if err := checkContrast(e.pe.central-e.pe.bg, scale, "field", e.axis); err != nil {
			return FieldResult{}, err
		}
	}

	ang, angWarn := edgeAngles(img, s, cx, cy, sx, sy, o, xe.bg, ye.bg)
	warn = append(warn, angWarn...)

	// Perpendicular distances from the axis (package doc, step 6).
	yc := (ar - float64(r0+r1)/2) * sy // y of the crossline band
	xc := (float64(c0+c1)/2 - ac) * sx // x of the inline band
	rad := func(e string) (float64, float64) {
		t := ang[e] * math.Pi / 180
		return math.Cos(t), math.Sin(t)
	}
	res := FieldResult{
		PenumbraMM:    map[string]float64{},
		EdgeAngleDeg:  ang,
		GantryDeg:     img.GantryDeg,
		CollimatorDeg: img.CollimatorDeg,
		Inverted:      flip,
		PixelSizeXMM:  sx,
		PixelSizeYMM:  sy,
		AxisSource:    axisSrc,
		Geometry:      img.Geometry,
		CentralValue:  xe.central,
		Background:    xe.bg,
	}
	cs, sn := rad(EdgeX1)
	res.X1MM = -((xe.lo50-ac)*sx*cs + yc*sn)
	res.PenumbraMM[EdgeX1] = math.Abs(xe.lo80-xe.lo20) * sx * cs
	cs, sn = rad(EdgeX2)
	res.X2MM = (xe.hi50-ac)*sx*cs + yc*sn
	res.PenumbraMM[EdgeX2] = math.Abs(xe.hi80-xe.hi20) * sx * cs
	cs, sn = rad(EdgeY2)
	res.Y2MM = -xc*sn + (ar-ye.lo50)*sy*cs
	res.PenumbraMM[EdgeY2] = math.Abs(ye.lo80-ye.lo20) * sy * cs
	cs, sn = rad(EdgeY1)
	res.Y1MM = xc*sn - (ar-ye.hi50)*sy*cs
	res.PenumbraMM[EdgeY1] = math.Abs(ye.hi80-ye.hi20) * sy * cs

	res.FieldXMM = res.X1MM + res.X2MM
	res.FieldYMM = res.Y1MM + res.Y2MM
	res.CentreXMM = (res.X2MM - res.X1MM) / 2
	res.CentreYMM = (res.Y2MM - res.Y1MM) / 2

	n := 0
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, e := range []string{EdgeX1, EdgeX2, EdgeY1, EdgeY2} {
		a := ang[e]
		res.RotationDeg += a
		lo, hi = math.Min(lo, a), math.Max(hi, a)
		n++
	}
	res.RotationDeg /= float64(n)
	if math.Abs(res.RotationDeg) > o.RotationWarnDeg {
		warn = append(warn, fmt.Sprintf("field edges are rotated %.2f° from the image axes (counter-clockwise positive as displayed): jaw distances are perpendicular to the measured edges; check the collimator angle", res.RotationDeg))
	}
	if hi-lo > 2*o.RotationWarnDeg {
		warn = append(warn, fmt.Sprintf("field edges are not parallel (edge angles X1 %.2f°, X2 %.2f°, Y1 %.2f°, Y2 %.2f°): a jaw may be tilted, or the field is not rectangular", ang[EdgeX1], ang[EdgeX2], ang[EdgeY1], ang[EdgeY2]))
	}
	warn = append(warn, collimatorWarning(img)...)
	res.Warnings = append(append([]string{}, img.Warnings...), warn...)
	return res, nil
}

// collimatorWarning warns when an image not placed by DecodeDICOM carries a
// collimator angle other than 0°: its names are not remapped.
func collimatorWarning(img Image) []string {
	deg := img.CollimatorDeg
	if deg == nil || img.Geometry != nil {
		return nil
	}
	a := math.Mod(*deg, 360)
	if a < 0 {
		a += 360
	}
	if math.Min(a, 360-a) <= 0.1 {
		return nil
	}
	return []string{fmt.Sprintf("collimator angle is %.1f°: edge and bank names follow the image sides at collimator 0 and are not remapped", *deg)}
}

// MinContrastFraction is the smallest step between background and field
// (or picket strip) accepted, as a fraction of the signal range: the largest
// absolute stored value of the image. A real portal field stands out by
// most of that range; a step of a few counts on a flat image is not a field
// (common practice: 5% is far below any exposed field and far above
// rounding).
const MinContrastFraction = 0.05

// valueScale is the signal range of the image: max |stored value|.
func valueScale(im Image) float64 {
	m := 0.0
	for _, v := range im.Pix {
		m = math.Max(m, math.Abs(v))
	}
	return m
}

// checkContrast refuses a contrast below MinContrastFraction of scale.
func checkContrast(contrast, scale float64, what, axis string) error {
	if contrast >= MinContrastFraction*scale && contrast > 0 {
		return nil
	}
	return fmt.Errorf("%w: no real %s along %s: it stands %.4g above the background, %.2g%% of the signal range %.4g; at least %.0f%% is needed (is the image flat or unexposed?)",
		ErrNoField, what, axis, contrast, 100*contrast/math.Max(scale, math.SmallestNonzeroFloat64), scale, 100*MinContrastFraction)
}

// halfBand converts a band width in mm to a half-width in samples.
func halfBand(bandMM, pxMM float64) int {
	return max(0, int(math.Round(bandMM/2/pxMM)))
}

// coarseSpan finds the 50% extent of a projection profile between its
// background (mean of the lowest 10%) and its smoothed maximum. The contrast
// must exceed 10× the sample noise.
func coarseSpan(p, scratch []float64, axis string) (span, error) {
	bg := lowMean(p, 0.1, scratch)
	i, top := smoothMax(p)
	noise := noiseSD(p, scratch)
	if !(top-bg > 10*noise) || !(top > bg) {
		return span{}, fmt.Errorf("%w: no field along %s: contrast %.4g is not above 10× the noise %.4g", ErrNoField, axis, top-bg, noise)
	}
	level := (bg + top) / 2
	lo, ok1 := crossing(p, i, -1, level)
	hi, ok2 := crossing(p, i, +1, level)
	if !ok1 || !ok2 {
		return span{}, fmt.Errorf("%w: the field along %s does not fall to 50%% before the image border: the field may extend beyond the imager", ErrNoField, axis)
	}
	return span{lo, hi}, nil
}

// measureProfile finds the 50, 80 and 20% crossings on both sides of the
// field centre (sample c) of profile p. widthPx is the coarse field width in
// samples; loName and hiName name the low- and high-index edges for errors.
func measureProfile(p []float64, c int, widthPx, pxMM float64, o FieldOptions, scratch []float64, loName, hiName string) (profileEdges, error) {
	var e profileEdges
	e.bg = lowMean(p, 0.1, scratch)
	w := max(1, int(math.Round(o.CentralMM/pxMM)))
	w = min(w, max(1, int(widthPx/4)))
	e.central = meanRange(p, c-w, c+w)
	base := e.bg
	if o.AbsoluteLevels {
		base = 0
	}
	amp := e.central - base
	if !(amp > 0) {
		return e, fmt.Errorf("%w: central value %.4g is not above the base level %.4g", ErrNoField, e.central, base)
	}
	level := func(f float64) float64 { return base + f*amp }
	type want struct {
		dst  *float64
		dir  int
		f    float64
		name string
	}
	for _, q := range []want{
		{&e.lo50, -1, 0.5, loName}, {&e.lo80, -1, 0.8, loName}, {&e.lo20, -1, 0.2, loName},
		{&e.hi50, +1, 0.5, hiName}, {&e.hi80, +1, 0.8, hiName}, {&e.hi20, +1, 0.2, hiName},
	} {
		x, ok := crossing(p, c, q.dir, level(q.f))
		if !ok {
			hint := "the field may extend beyond the imager"
			if o.AbsoluteLevels && q.f < 0.5 {
				hint = fmt.Sprintf("the background is %.0f%% of the central value; leave AbsoluteLevels off", 100*e.bg/e.central)
			}
			return e, fmt.Errorf("%w: %s edge: the profile does not fall to %.0f%% of the central value before the image border: %s", ErrNoField, q.name, 100*q.f, hint)
		}
		*q.dst = x
	}
	return e, nil
}
