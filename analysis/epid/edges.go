package epid

import (
	"math"
	"slices"
)

// crossing walks the profile p from index start in direction dir (+1 or -1)
// and returns the fractional index where it first falls from at or above
// level to below it, by linear interpolation between the two samples:
//
//	x = i + dir·(p[i] - level)/(p[i] - p[i+dir])
//
// ok is false when p never falls below level before its end, or when start
// itself is below level.
func crossing(p []float64, start, dir int, level float64) (x float64, ok bool) {
	if start < 0 || start >= len(p) || p[start] < level {
		return 0, false
	}
	for i := start; i+dir >= 0 && i+dir < len(p); i += dir {
		a, b := p[i], p[i+dir]
		if a >= level && b < level {
			return float64(i) + float64(dir)*(a-level)/(a-b), true
		}
	}
	return 0, false
}

// rowBandMean sets dst[c] to the mean signal of rows r0..r1 (inclusive,
// clipped to the image) in column c. len(dst) must be im.Cols.
func rowBandMean(im Image, s signal, r0, r1 int, dst []float64) {
	r0, r1 = max(r0, 0), min(r1, im.Rows-1)
	clear(dst)
	for r := r0; r <= r1; r++ {
		row := im.Pix[r*im.Cols : (r+1)*im.Cols]
		for c, v := range row {
			dst[c] += v
		}
	}
	n := float64(r1 - r0 + 1)
	for c := range dst {
		dst[c] = s.of(dst[c] / n)
	}
}

// colBandMean sets dst[r] to the mean signal of columns c0..c1 (inclusive,
// clipped) in row r. len(dst) must be im.Rows.
func colBandMean(im Image, s signal, c0, c1 int, dst []float64) {
	c0, c1 = max(c0, 0), min(c1, im.Cols-1)
	n := float64(c1 - c0 + 1)
	for r := range dst {
		row := im.Pix[r*im.Cols+c0 : r*im.Cols+c1+1]
		sum := 0.0
		for _, v := range row {
			sum += v
		}
		dst[r] = s.of(sum / n)
	}
}

// projections sets colMean[c] to the mean signal of column c over all rows and
// rowMean[r] to the mean of row r over all columns, in one pass.
func projections(im Image, s signal, colMean, rowMean []float64) {
	clear(colMean)
	for r := 0; r < im.Rows; r++ {
		row := im.Pix[r*im.Cols : (r+1)*im.Cols]
		sum := 0.0
		for c, v := range row {
			colMean[c] += v
			sum += v
		}
		rowMean[r] = s.of(sum / float64(im.Cols))
	}
	for c := range colMean {
		colMean[c] = s.of(colMean[c] / float64(im.Rows))
	}
}

// lowMean is the mean of the lowest fraction frac of the values of p: the
// background estimate of a profile that is partly outside the field.
func lowMean(p []float64, frac float64, scratch []float64) float64 {
	scratch = append(scratch[:0], p...)
	slices.Sort(scratch)
	n := max(1, int(frac*float64(len(scratch))))
	sum := 0.0
	for _, v := range scratch[:n] {
		sum += v
	}
	return sum / float64(n)
}

// smoothMax returns the index and value of the maximum of the 5-point moving
// average of p, which resists single-pixel noise.
func smoothMax(p []float64) (int, float64) {
	best, bi := math.Inf(-1), 0
	for i := range p {
		lo, hi := max(i-2, 0), min(i+2, len(p)-1)
		sum := 0.0
		for _, v := range p[lo : hi+1] {
			sum += v
		}
		if m := sum / float64(hi-lo+1); m > best {
			best, bi = m, i
		}
	}
	return bi, best
}

// noiseSD estimates the sample noise of p from its first differences, which
// ignores the slow field shape: 1.4826·median|p[i+1]-p[i]|/√2 (the median
// absolute deviation scaled to a Gaussian standard deviation, common practice).
func noiseSD(p []float64, scratch []float64) float64 {
	if len(p) < 3 {
		return 0
	}
	scratch = scratch[:0]
	for i := 1; i < len(p); i++ {
		scratch = append(scratch, math.Abs(p[i]-p[i-1]))
	}
	slices.Sort(scratch)
	return 1.4826 * scratch[len(scratch)/2] / math.Sqrt2
}

// meanRange is the mean of p[lo..hi] (inclusive, clipped).
func meanRange(p []float64, lo, hi int) float64 {
	lo, hi = max(lo, 0), min(hi, len(p)-1)
	if hi < lo {
		return math.NaN()
	}
	sum := 0.0
	for _, v := range p[lo : hi+1] {
		sum += v
	}
	return sum / float64(hi-lo+1)
}

// lineFit is the ordinary least-squares line y = a + b·x (normal equations,
// common practice):
//
//	b = Σ(x-x̄)(y-ȳ) / Σ(x-x̄)²,  a = ȳ - b·x̄
//
// ok is false for fewer than two distinct x.
func lineFit(x, y []float64) (a, b float64, ok bool) {
	n := float64(len(x))
	if len(x) < 2 || len(x) != len(y) {
		return 0, 0, false
	}
	var mx, my float64
	for i := range x {
		mx += x[i]
		my += y[i]
	}
	mx, my = mx/n, my/n
	var sxx, sxy float64
	for i := range x {
		dx := x[i] - mx
		sxx += dx * dx
		sxy += dx * (y[i] - my)
	}
	if sxx == 0 {
		return my, 0, false
	}
	b = sxy / sxx
	return my - b*mx, b, true
}
