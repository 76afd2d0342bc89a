package profile

import (
	"fmt"
	"math"
	"slices"
)

// FlattenedMarginMM returns the margin d_m (mm) removed from each side of a
// field of size fieldMM (mm) to give the flattened region, per IEC 60976
// (from memory):
//
//	50 mm ≤ F < 100 mm:   d_m = 10 mm
//	100 mm ≤ F ≤ 300 mm:  d_m = 0.1·F   (the "central 80%")
//	F > 300 mm:           d_m = 30 mm
//
// doubled along a diagonal. IEC 60976 defines no region below 50 mm; there
// the central 80% (d_m = 0.1·F) is used and defined is false.
func FlattenedMarginMM(fieldMM float64, diagonal bool) (marginMM float64, defined bool) {
	switch {
	case fieldMM < 50:
		marginMM = 0.1 * fieldMM
	case fieldMM < 100:
		marginMM, defined = 10, true
	case fieldMM <= 300:
		marginMM, defined = 0.1*fieldMM, true
	default:
		marginMM, defined = 30, true
	}
	if diagonal {
		marginMM *= 2
	}
	return marginMM, defined
}

// flatnessSymmetry fills the flatness and symmetry fields of res over the
// flattened region centred on res.CentreMM. Values at the region ends and at
// mirror positions are interpolated; every sample inside the region is used.
func (c *curve) flatnessSymmetry(res *Result, diagonal bool) error {
	field, centre := res.FieldSizeMM, res.CentreMM
	margin, defined := FlattenedMarginMM(field, diagonal)
	if !defined {
		res.Warnings = append(res.Warnings, fmt.Sprintf("field size %.1f mm is below 50 mm, where IEC 60976 defines no flattened region; flatness and symmetry use the central 80%%", field))
	}
	half := field/2 - margin
	lo, hi := centre-half, centre+half
	res.FlattenedRegionMM = [2]float64{lo, hi}
	first, _ := slices.BinarySearch(c.x, lo) // first sample ≥ lo
	last, found := slices.BinarySearch(c.x, hi)
	if !found {
		last-- // last sample ≤ hi
	}

	// Flatness: extremes over the region ends and the samples inside.
	dLo, dHi := c.at(lo), c.at(hi)
	dMax, dMin := max(dLo, dHi), min(dLo, dHi)
	minAt := lo
	if dHi < dLo {
		minAt = hi
	}
	for i := first; i <= last; i++ {
		dMax = max(dMax, c.y[i])
		if c.y[i] < dMin {
			dMin, minAt = c.y[i], c.x[i]
		}
	}
	if !(dMin > 0) {
		return fmt.Errorf("%w: the signal at %g mm, inside the flattened region [%g, %g] mm, is %g; flatness and symmetry need positive signal across the field", ErrNoSignal, minAt, lo, hi, dMin)
	}
	res.FlatnessPct = 100 * (dMax - dMin) / (dMax + dMin)
	res.FlatnessIECPct = 100 * dMax / dMin

	// Point symmetry: each sample (and each region end) against the
	// interpolated signal at its mirror position about the centre.
	d0 := c.at(centre)
	maxDiff, maxRatio := math.Abs(dLo-dHi), max(dLo/dHi, dHi/dLo)
	hint := last
	for i := first; i <= last; i++ {
		d := c.y[i]
		m := c.atFrom(2*centre-c.x[i], &hint)
		maxDiff = max(maxDiff, math.Abs(d-m))
		maxRatio = max(maxRatio, d/m, m/d)
	}
	res.SymmetryPct = 100 * maxDiff / d0
	res.SymmetryIECPct = 100 * maxRatio

	aL, aR := c.integral(lo, centre), c.integral(centre, hi)
	res.SymmetryAreaPct = 100 * (aL - aR) / (aL + aR)
	return nil
}

// integral returns the area under the linear interpolant of the profile from
// a to b (a ≤ b, mm × signal): the trapezoid rule over the samples between,
// with interpolated end values.
func (c *curve) integral(a, b float64) float64 {
	i, _ := slices.BinarySearch(c.x, a)
	if i < len(c.x) && c.x[i] == a {
		i++
	}
	px, py := a, c.at(a)
	sum := 0.0
	for ; i < len(c.x) && c.x[i] < b; i++ {
		sum += 0.5 * (py + c.y[i]) * (c.x[i] - px)
		px, py = c.x[i], c.y[i]
	}
	return sum + 0.5*(py+c.at(b))*(b-px)
}
