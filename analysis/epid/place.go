package epid

import (
	"fmt"
	"math"
	"strings"

	"github.com/suyashkumar/dicom"
)

// placeImage reads how the imager sat in the beam and turns the stored
// image into the analysed frame (see frameMap): columns along +X and rows
// along −Y of the IEC BEAM LIMITING DEVICE system, so that X1 is on the
// left, X2 on the right, Y2 at the top and Y1 at the bottom whatever the
// stored orientation and collimator quadrant.
//
// The central axis comes from RTImagePosition (3002,0012), the position of
// the centre of the first transmitted pixel in the IEC X-RAY IMAGE RECEPTOR
// system, and XRayImageReceptorTranslation (3002,000D), the position of that
// system's origin in the IEC GANTRY system (PS3.3 C.8.8.2). With the
// receptor angle 0 the receptor axes are parallel to the gantry axes, so
// the beam axis (gantry x = y = 0) lies at receptor (−Tx, −Ty), and for the
// default orientation (rows along +x, columns along −y)
//
//	col = (−Tx − Px)/Δcol,  row = (Py + Ty)/Δrow
//
// Δ the imager-plane pixel spacings. Other axis-aligned orientations project
// (−T − P) onto their own row and column directions.
//
// Refused, each with an error naming the attribute: RTImagePlane other than
// NORMAL; XRayImageReceptorAngle beyond MaxReceptorAngleDeg;
// RTImageOrientation not axis-aligned; a collimator angle more than
// MaxCollimatorOffQuadrantDeg from 0, 90, 180 or 270°; a non-zero
// translation without RTImagePosition.
func placeImage(ds *dicom.Dataset, o DecodeOptions, im *Image, imagerPlane bool, fileColl *float64) (warn []string, err error) {
	g := &GeometryUsed{}
	if p := strings.ToUpper(firstString(ds, tagRTImagePlane)); p != "" && p != "NORMAL" {
		return nil, badTag(kwRTImagePlane, numRTImagePlane, fmt.Sprintf("%q: the imager is not normal to the beam axis; only NORMAL images are measured", p))
	}
	if v, ok, err := firstFloat(ds, tagReceptorAngle); err != nil {
		return nil, badTag(kwReceptorAngle, numReceptorAngle, err.Error())
	} else if ok {
		g.ReceptorAngleDeg = &v
		if math.Abs(wrapDeg(v)) > MaxReceptorAngleDeg {
			return nil, badTag(kwReceptorAngle, numReceptorAngle, fmt.Sprintf("%g°: the imager is turned in its own plane by more than %g°; the direction of this angle is not applied, so the image is not measured (export it with the imager at 0°)", v, MaxReceptorAngleDeg))
		}
	}
	row, col, cosines, osrc, err := orientation(ds)
	if err != nil {
		return nil, err
	}
	g.Orientation, g.OrientationSource = cosines, osrc
	tr, err := floatsAny(ds, tagReceptorTranslation)
	if err != nil {
		return nil, badTag(kwTranslation, numTranslation, err.Error())
	}
	if tr != nil && len(tr) != 3 {
		return nil, badTag(kwTranslation, numTranslation, fmt.Sprintf("%d value(s) %v; expected x, y, z in mm", len(tr), tr))
	}
	g.ReceptorTranslationMM = tr

	// Collimator angle and the quadrant that names the edges.
	coll, cwarn := collimatorAngle(o.CollimatorDeg, fileColl, g)
	warn = append(warn, cwarn...)
	q := 0
	if coll != nil {
		var off float64
		q, off = quadrant(*coll)
		if math.Abs(off) > MaxCollimatorOffQuadrantDeg {
			return nil, badTag(kwCollimator, numCollimator, fmt.Sprintf("%g° is %.1f° from the nearest of 0, 90, 180, 270°: jaw and leaf names are given only within %g° of those angles", *coll, math.Abs(off), MaxCollimatorOffQuadrantDeg))
		}
		if math.Abs(off) > CollimatorQuadrantTolDeg {
			warn = append(warn, fmt.Sprintf("collimator angle %g° is %.1f° from %d°: names follow %d°; edges are measured perpendicular to themselves", *coll, math.Abs(off), 90*q, 90*q))
		}
	}
	im.CollimatorDeg = coll
	g.NamesQuadrantDeg = 90 * q
	m := newFrameMap(im.Rows, im.Cols, im.RowSpacingMM, im.ColSpacingMM, row, col, q)
	g.Sides = m.sides()

	// Central axis in stored pixel coordinates.
	g.AxisSource = "image centre"
	axRow, axCol := float64(im.Rows-1)/2, float64(im.Cols-1)/2
	hasAxis := false
	translated := tr != nil && (math.Abs(tr[0]) > 0.01 || math.Abs(tr[1]) > 0.01)
	pos, perr := floatsN(ds, tagRTImagePosition, 2)
	switch {
	case o.IgnoreImagePosition:
		warn = append(warn, "RTImagePosition and XRayImageReceptorTranslation ignored (DecodeOptions.IgnoreImagePosition): axis at the image centre")
	case perr != nil:
		return nil, badTag(kwRTImagePosition, numRTImagePosition, perr.Error())
	case pos == nil && translated:
		return nil, missingTag(kwRTImagePosition, numRTImagePosition, fmt.Sprintf("the imager is translated by %g, %g mm (XRayImageReceptorTranslation (3002,000D)) but the position of its first pixel is not given, so the beam axis cannot be placed", tr[0], tr[1]))
	case pos == nil:
	case !imagerPlane:
		warn = append(warn, "RTImagePosition (3002,0012) is given in the imager plane but only the isocentre-plane PixelSpacing is known (no SID and SAD): axis at the image centre; give SID and SAD to place it")
	default:
		g.RTImagePositionMM = pos
		var tx, ty float64
		if tr != nil {
			tx, ty = tr[0], tr[1]
		}
		dx, dy := -tx-pos[0], -ty-pos[1]
		c := float64(row.x)*dx/im.ColSpacingMM + float64(row.y)*dy/im.ColSpacingMM
		r := float64(col.x)*dx/im.RowSpacingMM + float64(col.y)*dy/im.RowSpacingMM
		if r >= 0 && r <= float64(im.Rows-1) && c >= 0 && c <= float64(im.Cols-1) {
			axRow, axCol, hasAxis = r, c, true
			g.AxisSource = "RTImagePosition + XRayImageReceptorTranslation"
			if tr == nil {
				g.AxisSource = "RTImagePosition (XRayImageReceptorTranslation absent: imager origin on the beam axis)"
			}
		} else {
			warn = append(warn, fmt.Sprintf("RTImagePosition (3002,0012) %g, %g mm with translation %g, %g mm puts the axis outside the image (row %.1f, column %.1f): axis at the image centre", pos[0], pos[1], tx, ty, r, c))
		}
	}
	g.AxisRow, g.AxisCol = axRow, axCol

	im.Pix = m.apply(im.Pix)
	im.Rows, im.Cols = m.outRows, m.outCols
	im.RowSpacingMM, im.ColSpacingMM = m.spacings()
	im.HasAxis = hasAxis
	if hasAxis {
		im.AxisRow, im.AxisCol = m.point(axRow, axCol)
	}
	im.AxisSource = g.AxisSource
	im.Geometry = g
	return warn, nil
}

// collimatorAngle chooses the collimator angle: the caller's, else the
// file's; a missing angle gives a warning that travels with every result.
func collimatorAngle(opt, file *float64, g *GeometryUsed) (*float64, []string) {
	var warn []string
	switch {
	case opt != nil:
		v := *opt
		g.CollimatorSource = "supplied with the analysis options"
		if file != nil && math.Abs(wrapDeg(*file-v)) > 0.5 {
			warn = append(warn, fmt.Sprintf("BeamLimitingDeviceAngle (300A,0120) is %g° in the file; the supplied %g° was used", *file, v))
		}
		g.CollimatorDeg = &v
	case file != nil:
		v := *file
		g.CollimatorSource = kwCollimator + " " + numCollimator
		g.CollimatorDeg = &v
	default:
		g.CollimatorSource = "missing: 0° assumed"
		warn = append(warn, "collimator angle unknown: BeamLimitingDeviceAngle (300A,0120) is missing, so jaw, bank and leaf names assume collimator 0°; state the angle (--collimator-deg, API collimator_deg) if it was not 0°")
	}
	return g.CollimatorDeg, warn
}
