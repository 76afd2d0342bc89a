package epid

import (
	"fmt"
	"math"
	"slices"
)

// PicketOptions configure AnalyzePicketFence. Zero values take the defaults.
type PicketOptions struct {
	// NominalMM are the planned picket (strip) centres, mm at the isocentre,
	// x positive toward X2. Empty: pickets are found in the image and each
	// picket's nominal position is the mean of its measured centres.
	NominalMM []float64
	// Layout gives the leaf pair widths (Layout60, Layout80, ParseLayout).
	Layout LeafLayout
	// ToleranceMM is the action threshold on each bank's edge. Default 0.5 mm
	// (an AAPM practice-guideline value quoted in physics.md; TG-142 asks
	// 1 mm monthly, from memory).
	ToleranceMM float64
	// UseError compares |error_mm| (measured − nominal) with the tolerance.
	// By default |residual_mm| is compared, so a global shift or rotation of
	// the imager does not flag every leaf.
	UseError bool
	// StripWidthMM is the nominal 50% width of each strip, mm. Default: the
	// median measured width of that picket over all leaf pairs, which removes
	// the leaf-end transmission from the per-bank errors.
	StripWidthMM float64
	// CentralFraction of each leaf's width is averaged into its profile, away
	// from the interleaf gaps. Default 0.5.
	CentralFraction float64
	// SearchMM is the half-width of the window searched around each nominal
	// picket. Default: 0.45× the smallest picket spacing, at most 15 mm.
	SearchMM float64
	// Invert says how to decide whether the greyscale is inverted.
	Invert InvertMode
}

// LeafResult is one bank's leaf end at one picket: the 50% edge of the strip
// on that bank's side. Bank 1 is the X1 side (its leaf ends form the strip's
// left edge), bank 2 the X2 side (the right edge). Positions and errors are
// mm at the isocentre, positive toward X2.
type LeafResult struct {
	Bank       int     `json:"bank"`
	Pair       int     `json:"pair"`
	PicketMM   float64 `json:"picket_mm"`   // nominal picket centre
	PositionMM float64 `json:"position_mm"` // measured 50% edge
	ErrorMM    float64 `json:"error_mm"`    // measured − nominal edge (picket ± width/2)
	ResidualMM float64 `json:"residual_mm"` // error minus the picket's straight-line fit over pairs
}

// PairResult is the strip centre of one leaf pair at one picket.
type PairResult struct {
	Pair       int     `json:"pair"`
	YMM        float64 `json:"y_mm"` // pair centre, mm toward Y2
	PicketMM   float64 `json:"picket_mm"`
	CentreMM   float64 `json:"centre_mm"` // midpoint of the two 50% edges
	WidthMM    float64 `json:"width_mm"`  // distance between the 50% edges
	ErrorMM    float64 `json:"error_mm"`
	ResidualMM float64 `json:"residual_mm"`
}

// PicketSummary describes one picket over all measured pairs.
type PicketSummary struct {
	NominalMM float64 `json:"nominal_mm"`
	MeanMM    float64 `json:"mean_mm"`   // mean measured centre
	OffsetMM  float64 `json:"offset_mm"` // straight-line fit of centre error at y = 0
	// RotationDeg is the strip's angle from the image columns,
	// counter-clockwise positive as displayed.
	RotationDeg float64 `json:"rotation_deg"`
	WidthMM     float64 `json:"width_mm"` // reference strip width used for the bank errors
	Pairs       int     `json:"pairs"`
}

// BankSummary sums up one bank's leaf ends over all pairs and pickets.
type BankSummary struct {
	Bank             int     `json:"bank"`
	N                int     `json:"n"`
	MeanErrorMM      float64 `json:"mean_error_mm"`
	MaxAbsErrorMM    float64 `json:"max_abs_error_mm"`
	MaxAbsResidualMM float64 `json:"max_abs_residual_mm"`
}

// PicketResult is the outcome of AnalyzePicketFence.
type PicketResult struct {
	Layout           string          `json:"layout"`
	ToleranceMM      float64         `json:"tolerance_mm"`
	Criterion        string          `json:"criterion"` // "residual_mm" or "error_mm"
	Leaves           []LeafResult    `json:"leaves"`
	Pairs            []PairResult    `json:"pairs"`
	Pickets          []PicketSummary `json:"pickets"`
	Banks            []BankSummary   `json:"banks"`
	MaxAbsErrorMM    float64         `json:"max_abs_error_mm"`
	MaxAbsResidualMM float64         `json:"max_abs_residual_mm"`
	Exceeding        []LeafResult    `json:"exceeding"`
	PairsMeasured    int             `json:"pairs_measured"`
	PairsNotImaged   []int           `json:"pairs_not_imaged"`  // centre outside the image
	PairsNotExposed  []int           `json:"pairs_not_exposed"` // no strip found (e.g. behind a jaw)
	GantryDeg        *float64        `json:"gantry_deg,omitempty"`
	CollimatorDeg    *float64        `json:"collimator_deg,omitempty"`
	Inverted         bool            `json:"inverted"`
	PixelSizeXMM     float64         `json:"pixel_size_x_mm"`
	PixelSizeYMM     float64         `json:"pixel_size_y_mm"`
	AxisSource       string          `json:"axis_source"`
	Geometry         *GeometryUsed   `json:"geometry_used,omitempty"`
	Warnings         []string        `json:"warnings"`
}

// strip is one measured strip (one pair, one picket), positions in mm.
type strip struct {
	ok               bool
	amp, valley      float64
	peakAt, lo, hi   int // peak column and search window, columns
	left, right, mid float64
	errC, err1, err2 float64
	resC, res1, res2 float64
}

// AnalyzePicketFence measures an MLC picket fence taken at collimator 0:
// narrow strips parallel to the image columns, each formed by the leaf ends
// of bank 1 (left) and bank 2 (right) of every pair.
//
// For each leaf pair the rows under the central CentralFraction of its width
// are averaged into a profile along x. For each picket, within SearchMM of
// its nominal position, the strip's peak P (3-point mean) and valley V (mean
// of the lowest 10% of the window) are found. Its edges are the crossings of
// V + A/2 on either side of the peak, by linear interpolation, where A is the
// median strip height P − V of that picket over all pairs (or the strip's own
// height when it differs from the median by more than 20%): with one common
// level a single leaf's error moves only its own edge, even for strips so
// narrow that their height depends on their width. Then, in mm at the
// isocentre:
//
//	centre  = (left + right)/2,            centre error = centre − nominal
//	bank 1 error = left  − (nominal − w/2),  bank 2 error = right − (nominal + w/2)
//
// with w = StripWidthMM or the picket's median measured width. For each
// picket and each of centre, bank 1 and bank 2, a least-squares line of error
// against the pair's y position absorbs a global shift and rotation; the
// residual is the error minus that line (physics.md: error = measured −
// nominal, or the residual from a straight-line fit across leaves; common
// practice for the picket-fence test of Chui, Spirou and LoSasso, Med Phys
// 23:635, 1996 — from memory).
// A bank edge whose |residual| (or |error| with UseError) exceeds ToleranceMM
// is listed in Exceeding. Pairs whose strip is weaker than half the picket's
// median strip, not above 10× the profile noise, or below MinContrastFraction
// of the signal range count as not exposed.
func AnalyzePicketFence(img Image, o PicketOptions) (PicketResult, error) {
	if err := img.Validate(); err != nil {
		return PicketResult{}, err
	}
	if err := o.Layout.Validate(); err != nil {
		return PicketResult{}, err
	}
	if err := o.check(); err != nil {
		return PicketResult{}, err
	}
	tol := o.ToleranceMM
	if tol == 0 {
		tol = 0.5
	}
	frac := o.CentralFraction
	if frac == 0 {
		frac = 0.5
	}
	flip, warn, err := decideFlip(img, o.Invert)
	if err != nil {
		return PicketResult{}, err
	}
	s := newSignal(img, flip)
	sx, sy := img.PixelSizeIsoMM()
	ar, ac, axisSrc := img.Axis()
	xMin, xMax := (0-ac)*sx, (float64(img.Cols-1)-ac)*sx

	nominal := slices.Clone(o.NominalMM)
	auto := len(nominal) == 0
	if auto {
		nominal, err = findPickets(img, s, sx, ac)
		if err != nil {
			return PicketResult{}, err
		}
		warn = append(warn, fmt.Sprintf("no nominal picket positions given: %d pickets found; errors are relative to each picket's mean position", len(nominal)))
	}
	for i, x := range nominal {
		if math.IsNaN(x) || x <= xMin || x >= xMax {
			return PicketResult{}, fmt.Errorf("%w: picket %d at %g mm lies outside the imaged x range %.1f to %.1f mm", ErrInvalidOption, i+1, x, xMin, xMax)
		}
		if i > 0 && x <= nominal[i-1] {
			return PicketResult{}, fmt.Errorf("%w: NominalMM must increase: picket %d at %g mm follows %g mm", ErrInvalidOption, i+1, x, nominal[i-1])
		}
	}
	minSpacing := math.Inf(1)
	for i := 1; i < len(nominal); i++ {
		minSpacing = math.Min(minSpacing, nominal[i]-nominal[i-1])
	}
	halfWin := math.Min(15, 0.45*minSpacing)
	if o.SearchMM > 0 {
		if o.SearchMM > minSpacing/2 {
			return PicketResult{}, fmt.Errorf("%w: SearchMM %g exceeds half the smallest picket spacing (%.2f mm): windows would overlap", ErrInvalidOption, o.SearchMM, minSpacing/2)
		}
		halfWin = o.SearchMM
	}

	// Locate every pair's strip peak at every picket.
	nPairs, nPk := len(o.Layout.WidthsMM), len(nominal)
	meas := make([][]strip, nPairs)
	profs := make([][]float64, nPairs)
	yOf := make([]float64, nPairs)
	scratch := make([]float64, 0, img.Cols)
	notImaged := []int{}
	minAmp := MinContrastFraction * valueScale(img)
	for i := range nPairs {
		yc, w := o.Layout.PairCentreMM(i)
		yOf[i] = yc
		rc := ar - yc/sy
		if rc < 0 || rc > float64(img.Rows-1) {
			notImaged = append(notImaged, i+1)
			continue
		}
		r0 := int(math.Ceil(ar - (yc+frac*w/2)/sy))
		r1 := int(math.Floor(ar - (yc-frac*w/2)/sy))
		if r0 > r1 {
			r0 = int(math.Round(rc))
			r1 = r0
		}
		prof := make([]float64, img.Cols)
		rowBandMean(img, s, r0, r1, prof)
		profs[i] = prof
		noise := noiseSD(prof, scratch)
		meas[i] = make([]strip, nPk)
		for j, xn := range nominal {
			if st := findStrip(prof, ac+xn/sx, halfWin/sx); st.ok && st.amp > 10*noise && st.amp >= minAmp {
				meas[i][j] = st
			}
		}
	}

	// Edges at half the picket's typical strip height. A strip weaker than
	// half the picket's median is not exposed; one within ±20% of the median
	// is cut at half the median, so a single leaf's error does not move its
	// partner's edge through the strip's own height; others at half their own.
	for j := range nPk {
		var amps []float64
		for i := range nPairs {
			if meas[i] != nil && meas[i][j].ok {
				amps = append(amps, meas[i][j].amp)
			}
		}
		if len(amps) == 0 {
			continue
		}
		med := median(amps)
		for i := range nPairs {
			if meas[i] == nil || !meas[i][j].ok {
				continue
			}
			st := &meas[i][j]
			if st.amp < 0.5*med {
				st.ok = false
				continue
			}
			ref := st.amp
			if math.Abs(st.amp/med-1) <= 0.2 {
				ref = med
			}
			l, ok1 := crossing(profs[i], st.peakAt, -1, st.valley+ref/2)
			r, ok2 := crossing(profs[i], st.peakAt, +1, st.valley+ref/2)
			if !ok1 || !ok2 || float64(st.lo) > l || float64(st.hi) < r {
				st.ok = false
				continue
			}
			st.left, st.right = (l-ac)*sx, (r-ac)*sx
			st.mid = (st.left + st.right) / 2
		}
	}

	res := PicketResult{
		Layout:          o.Layout.Name,
		ToleranceMM:     tol,
		Criterion:       "residual_mm",
		GantryDeg:       img.GantryDeg,
		CollimatorDeg:   img.CollimatorDeg,
		Inverted:        flip,
		PixelSizeXMM:    sx,
		PixelSizeYMM:    sy,
		AxisSource:      axisSrc,
		Geometry:        img.Geometry,
		PairsNotImaged:  notImaged,
		PairsNotExposed: []int{},
		Leaves:          []LeafResult{},
		Pairs:           []PairResult{},
		Exceeding:       []LeafResult{},
	}
	if o.UseError {
		res.Criterion = "error_mm"
	}

	partial := 0
	for i := range nPairs {
		if meas[i] == nil {
			continue
		}
		n := 0
		for j := range nPk {
			if meas[i][j].ok {
				n++
			}
		}
		switch {
		case n == 0:
			res.PairsNotExposed = append(res.PairsNotExposed, i+1)
		case n < nPk:
			partial++
		}
		if n > 0 {
			res.PairsMeasured++
		}
	}
	if res.PairsMeasured == 0 {
		return PicketResult{}, fmt.Errorf("%w: no picket strip found in any leaf pair of layout %q: check NominalMM, the layout and that the strips run along the image columns", ErrNoField, o.Layout.Name)
	}
	if partial > 0 {
		warn = append(warn, fmt.Sprintf("%d leaf pair(s) show strips at some pickets only; the missing strips are left out", partial))
	}

	// Errors and straight-line residuals per picket.
	for j := range nPk {
		var ys, widths, mids []float64
		var idx []int
		for i := range nPairs {
			if meas[i] != nil && meas[i][j].ok {
				idx = append(idx, i)
				ys = append(ys, yOf[i])
				widths = append(widths, meas[i][j].right-meas[i][j].left)
				mids = append(mids, meas[i][j].mid)
			}
		}
		ps := PicketSummary{NominalMM: nominal[j], Pairs: len(idx)}
		if len(idx) == 0 {
			warn = append(warn, fmt.Sprintf("picket at %g mm: no strip found", nominal[j]))
			res.Pickets = append(res.Pickets, ps)
			continue
		}
		ps.MeanMM = mean(mids)
		if auto {
			ps.NominalMM = ps.MeanMM
		}
		ps.WidthMM = o.StripWidthMM
		if ps.WidthMM == 0 {
			ps.WidthMM = median(widths)
		}
		ec, e1, e2 := make([]float64, len(idx)), make([]float64, len(idx)), make([]float64, len(idx))
		for k, i := range idx {
			st := &meas[i][j]
			st.errC = st.mid - ps.NominalMM
			st.err1 = st.left - (ps.NominalMM - ps.WidthMM/2)
			st.err2 = st.right - (ps.NominalMM + ps.WidthMM/2)
			ec[k], e1[k], e2[k] = st.errC, st.err1, st.err2
		}
		rc, a, b, ok := residuals(ys, ec)
		r1, _, _, _ := residuals(ys, e1)
		r2, _, _, _ := residuals(ys, e2)
		if !ok {
			warn = append(warn, fmt.Sprintf("picket at %g mm: fewer than 3 pairs measured; residuals are deviations from the mean", nominal[j]))
		}
		ps.OffsetMM = a
		ps.RotationDeg = -math.Atan(b) * 180 / math.Pi
		for k, i := range idx {
			st := &meas[i][j]
			st.resC, st.res1, st.res2 = rc[k], r1[k], r2[k]
		}
		res.Pickets = append(res.Pickets, ps)
	}

	// Flatten in pair, picket, bank order.
	banks := [2]BankSummary{{Bank: 1}, {Bank: 2}}
	for i := range nPairs {
		if meas[i] == nil {
			continue
		}
		for j := range nPk {
			st := meas[i][j]
			if !st.ok {
				continue
			}
			pk := res.Pickets[j].NominalMM
			res.Pairs = append(res.Pairs, PairResult{Pair: i + 1, YMM: yOf[i], PicketMM: pk, CentreMM: st.mid,
				WidthMM: st.right - st.left, ErrorMM: st.errC, ResidualMM: st.resC})
			for b, l := range []LeafResult{
				{Bank: 1, Pair: i + 1, PicketMM: pk, PositionMM: st.left, ErrorMM: st.err1, ResidualMM: st.res1},
				{Bank: 2, Pair: i + 1, PicketMM: pk, PositionMM: st.right, ErrorMM: st.err2, ResidualMM: st.res2},
			} {
				res.Leaves = append(res.Leaves, l)
				bs := &banks[b]
				bs.N++
				bs.MeanErrorMM += l.ErrorMM
				bs.MaxAbsErrorMM = math.Max(bs.MaxAbsErrorMM, math.Abs(l.ErrorMM))
				bs.MaxAbsResidualMM = math.Max(bs.MaxAbsResidualMM, math.Abs(l.ResidualMM))
				crit := l.ResidualMM
				if o.UseError {
					crit = l.ErrorMM
				}
				if math.Abs(crit) > tol {
					res.Exceeding = append(res.Exceeding, l)
				}
			}
		}
	}
	for b := range banks {
		if banks[b].N > 0 {
			banks[b].MeanErrorMM /= float64(banks[b].N)
		}
		res.MaxAbsErrorMM = math.Max(res.MaxAbsErrorMM, banks[b].MaxAbsErrorMM)
		res.MaxAbsResidualMM = math.Max(res.MaxAbsResidualMM, banks[b].MaxAbsResidualMM)
	}
	res.Banks = banks[:]
	if len(notImaged) > 0 {
		warn = append(warn, fmt.Sprintf("%d leaf pair(s) of layout %q lie outside the image", len(notImaged), o.Layout.Name))
	}
	warn = append(warn, collimatorWarning(img)...)
	res.Warnings = append(append([]string{}, img.Warnings...), warn...)
	return res, nil
}

func (o PicketOptions) check() error {
	for _, f := range []struct {
		name string
		v    float64
	}{{"ToleranceMM", o.ToleranceMM}, {"StripWidthMM", o.StripWidthMM}, {"SearchMM", o.SearchMM}, {"CentralFraction", o.CentralFraction}} {
		if f.v < 0 || math.IsNaN(f.v) || math.IsInf(f.v, 0) {
			return fmt.Errorf("%w: PicketOptions.%s = %g; give a positive value or 0 for the default", ErrInvalidOption, f.name, f.v)
		}
	}
	if o.CentralFraction > 1 {
		return fmt.Errorf("%w: PicketOptions.CentralFraction = %g; give a fraction of the leaf width in (0, 1]", ErrInvalidOption, o.CentralFraction)
	}
	return nil
}

// findStrip finds the highest point (3-point mean) of profile p within
// ±half columns of column c and the valley (mean of the lowest 10% of that
// window).
func findStrip(p []float64, c, half float64) strip {
	lo := max(0, int(math.Ceil(c-half)))
	hi := min(len(p)-1, int(math.Floor(c+half)))
	if hi-lo < 4 {
		return strip{}
	}
	win := p[lo : hi+1]
	imax, peak := 0, math.Inf(-1)
	for i := 1; i < len(win)-1; i++ {
		if m := (win[i-1] + win[i] + win[i+1]) / 3; m > peak {
			imax, peak = i, m
		}
	}
	valley := lowMean(win, 0.1, nil)
	if !(peak > valley) {
		return strip{}
	}
	return strip{ok: true, amp: peak - valley, valley: valley, peakAt: lo + imax, lo: lo, hi: hi}
}

// findPickets locates strips in the mean of all image rows: runs above the
// level halfway between the background (lowest 10%) and the maximum; each
// run's centre, between its interpolated 50% crossings, is a picket (mm).
func findPickets(im Image, s signal, sx, ac float64) ([]float64, error) {
	colMean := make([]float64, im.Cols)
	rowMean := make([]float64, im.Rows)
	projections(im, s, colMean, rowMean)
	bg := lowMean(colMean, 0.1, nil)
	_, top := smoothMax(colMean)
	noise := noiseSD(colMean, nil)
	if !(top-bg > 10*noise) {
		return nil, fmt.Errorf("%w: no picket strips: contrast %.4g is not above 10× the noise %.4g", ErrNoField, top-bg, noise)
	}
	if err := checkContrast(top-bg, valueScale(im), "picket strip", "the image columns"); err != nil {
		return nil, err
	}
	level := (bg + top) / 2
	var out []float64
	for c := 1; c < len(colMean); c++ {
		if colMean[c-1] < level && colMean[c] >= level {
			l := float64(c-1) + (level-colMean[c-1])/(colMean[c]-colMean[c-1])
			r, ok := crossing(colMean, c, +1, level)
			if !ok {
				break
			}
			out = append(out, ((l+r)/2-ac)*sx)
			c = int(r)
		}
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("%w: no complete picket strip found along the image columns", ErrNoField)
	}
	return out, nil
}

// residuals returns y minus its least-squares line over x, with the line's
// intercept a and slope b. With fewer than 3 points it returns y minus its
// mean and ok = false.
func residuals(x, y []float64) (r []float64, a, b float64, ok bool) {
	r = make([]float64, len(y))
	if len(x) >= 3 {
		if a, b, ok = lineFit(x, y); ok {
			for i := range y {
				r[i] = y[i] - (a + b*x[i])
			}
			return r, a, b, true
		}
	}
	m := mean(y)
	for i := range y {
		r[i] = y[i] - m
	}
	return r, m, 0, false
}

func mean(v []float64) float64 {
	if len(v) == 0 {
		return math.NaN()
	}
	s := 0.0
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}

func median(v []float64) float64 {
	if len(v) == 0 {
		return math.NaN()
	}
	c := slices.Clone(v)
	slices.Sort(c)
	n := len(c)
	if n%2 == 1 {
		return c[n/2]
	}
	return (c[n/2-1] + c[n/2]) / 2
}
