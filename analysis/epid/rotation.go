package epid

import (
	"fmt"
	"math"
)

// edgeAngles locates each field edge in o.RotationBands bands spread over the
// central 60% of its length and fits a least-squares line through the
// points. The angle of each edge relative to the image axes, counter-clockwise
// positive as displayed (x right, y up), is
//
//	X1, X2 (columns c found at rows r):  θ = atan((dc/dr)·(sx/sy))
//	Y1, Y2 (rows r found at columns c):  θ = atan(−(dr/dc)·(sy/sx))
//
// (derived from x = (c − c₀)·sx, y = (r₀ − r)·sy: a vertical edge turned by θ
// satisfies dx/dy = −tanθ, a horizontal edge dy/dx = tanθ). In each band the
// edge is the 50% crossing between the profile's background bgX/bgY and the
// band's own value at the field centre. An edge with fewer than three points
// gets angle 0 and a warning.
func edgeAngles(im Image, s signal, cx, cy span, sx, sy float64, o FieldOptions, bgX, bgY float64) (map[string]float64, []string) {
	k := o.RotationBands
	out := map[string]float64{EdgeX1: 0, EdgeX2: 0, EdgeY1: 0, EdgeY2: 0}
	var warn []string
	fit := func(name string, along, pos []float64, toDeg func(slope float64) float64) {
		if len(along) < 3 {
			warn = append(warn, fmt.Sprintf("%s edge angle not measured (%d of %d bands usable): 0° assumed", name, len(along), k))
			return
		}
		_, b, ok := lineFit(along, pos)
		if !ok {
			warn = append(warn, fmt.Sprintf("%s edge angle not measured: 0° assumed", name))
			return
		}
		out[name] = toDeg(b)
	}
	deg := func(t float64) float64 { return t * 180 / math.Pi }

	// Vertical edges (X1 left, X2 right), located in row bands.
	{
		buf := make([]float64, im.Cols)
		half := 0.3 * cy.width()
		hb := bandHalf(o.BandMM, sy, 2*half/float64(k-1))
		fc := int(math.Round(cx.mid()))
		w := max(1, int(cx.width()/8))
		var rows, left, right, rowsR []float64
		for i := range k {
			r := int(math.Round(cy.mid() - half + 2*half*float64(i)/float64(k-1)))
			r0, r1 := max(r-hb, 0), min(r+hb, im.Rows-1)
			rowBandMean(im, s, r0, r1, buf)
			lvl := bgX + 0.5*(meanRange(buf, fc-w, fc+w)-bgX)
			rc := float64(r0+r1) / 2
			if x, ok := crossing(buf, fc, -1, lvl); ok {
				rows, left = append(rows, rc), append(left, x)
			}
			if x, ok := crossing(buf, fc, +1, lvl); ok {
				rowsR, right = append(rowsR, rc), append(right, x)
			}
		}
		toDeg := func(b float64) float64 { return deg(math.Atan(b * sx / sy)) }
		fit(EdgeX1, rows, left, toDeg)
		fit(EdgeX2, rowsR, right, toDeg)
	}
	// Horizontal edges (Y2 top, Y1 bottom), located in column bands.
	{
		buf := make([]float64, im.Rows)
		half := 0.3 * cx.width()
		hb := bandHalf(o.BandMM, sx, 2*half/float64(k-1))
		fr := int(math.Round(cy.mid()))
		w := max(1, int(cy.width()/8))
		var cols, top, bottom, colsB []float64
		for i := range k {
			c := int(math.Round(cx.mid() - half + 2*half*float64(i)/float64(k-1)))
			c0, c1 := max(c-hb, 0), min(c+hb, im.Cols-1)
			colBandMean(im, s, c0, c1, buf)
			lvl := bgY + 0.5*(meanRange(buf, fr-w, fr+w)-bgY)
			cc := float64(c0+c1) / 2
			if y, ok := crossing(buf, fr, -1, lvl); ok {
				cols, top = append(cols, cc), append(top, y)
			}
			if y, ok := crossing(buf, fr, +1, lvl); ok {
				colsB, bottom = append(colsB, cc), append(bottom, y)
			}
		}
		toDeg := func(b float64) float64 { return deg(math.Atan(-b * sy / sx)) }
		fit(EdgeY2, cols, top, toDeg)
		fit(EdgeY1, colsB, bottom, toDeg)
	}
	return out, warn
}

// bandHalf is the half-width in samples of a rotation band: BandMM wide, but
// no wider than the spacing between bands (spacingPx samples).
func bandHalf(bandMM, pxMM, spacingPx float64) int {
	return max(0, min(halfBand(bandMM, pxMM), int(spacingPx/2)))
}
