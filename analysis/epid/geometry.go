package epid

import (
	"fmt"
	"math"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"
)

// GeometryUsed records how a decoded RT Image was placed in the beam's
// coordinates: where the central axis came from, the imager translation,
// orientation and angle that were read, and which collimator angle named the
// edges. It is copied into every result ("geometry_used") so that a reader
// sees what the numbers rest on.
type GeometryUsed struct {
	// AxisSource says how the central axis was found: "RTImagePosition +
	// XRayImageReceptorTranslation", "RTImagePosition (translation absent:
	// imager origin on the beam axis)", or "image centre".
	AxisSource string `json:"axis_source"`
	// AxisRow and AxisCol are the axis in pixel coordinates of the stored
	// image (row 0 at the top, as transmitted), before any remapping.
	AxisRow float64 `json:"axis_row"`
	AxisCol float64 `json:"axis_col"`
	// RTImagePositionMM is RTImagePosition (3002,0012) as read: x, y of the
	// centre of the first transmitted pixel in the imager plane, mm. Nil when
	// absent or not used.
	RTImagePositionMM []float64 `json:"rt_image_position_mm"`
	// ReceptorTranslationMM is XRayImageReceptorTranslation (3002,000D) as
	// read: x, y, z of the imager origin in the IEC GANTRY system, mm. Nil when
	// absent.
	ReceptorTranslationMM []float64 `json:"receptor_translation_mm"`
	// Orientation is RTImageOrientation (3002,0010): direction cosines of the
	// first row, then of the first column, in the IEC X-RAY IMAGE RECEPTOR
	// system. OrientationSource says whether it was read or defaulted.
	Orientation       []float64 `json:"orientation"`
	OrientationSource string    `json:"orientation_source"`
	// ReceptorAngleDeg is XRayImageReceptorAngle (3002,000E); nil when absent.
	ReceptorAngleDeg *float64 `json:"receptor_angle_deg"`
	// CollimatorDeg is the collimator (beam limiting device) angle used to
	// name the edges; nil when unknown (0° assumed, with a warning).
	// CollimatorSource names where it came from.
	CollimatorDeg    *float64 `json:"collimator_deg"`
	CollimatorSource string   `json:"collimator_source"`
	// NamesQuadrantDeg is the collimator quadrant (0, 90, 180 or 270) whose
	// rotation mapped the image sides to the jaw, bank and leaf-pair names.
	NamesQuadrantDeg int `json:"names_quadrant_deg"`
	// Sides gives, for each jaw, the side of the stored image as displayed
	// (row 0 at the top) on which it lies: "left", "right", "top" or
	// "bottom". MLC bank 1 is on the X1 side, bank 2 on the X2 side, leaf
	// pair 1 on the Y2 side.
	Sides map[string]string `json:"sides"`
}

// DICOM attributes of the imager geometry (PS3.3 C.8.8.2; numbers as in a
// DICOM data dictionary).
const (
	kwRTImagePlane     = "RTImagePlane"
	numRTImagePlane    = "(3002,000C)"
	kwTranslation      = "XRayImageReceptorTranslation"
	numTranslation     = "(3002,000D)"
	kwReceptorAngle    = "XRayImageReceptorAngle"
	numReceptorAngle   = "(3002,000E)"
	kwOrientation      = "RTImageOrientation"
	numOrientation     = "(3002,0010)"
	kwCollimator       = "BeamLimitingDeviceAngle"
	numCollimator      = "(300A,0120)"
	kwRTImagePosition  = "RTImagePosition"
	numRTImagePosition = "(3002,0012)"
)

// Limits on the geometry accepted.
const (
	// MaxReceptorAngleDeg: an imager turned by more than this in its own
	// plane is refused; the sign of XRayImageReceptorAngle is not applied.
	MaxReceptorAngleDeg = 0.1
	// CollimatorQuadrantTolDeg: within this of 0, 90, 180 or 270° the edge
	// names follow that quadrant without comment.
	CollimatorQuadrantTolDeg = 1.0
	// MaxCollimatorOffQuadrantDeg: up to this far from the nearest quadrant
	// the names of that quadrant are used, edges are measured perpendicular
	// to themselves and a warning is given; beyond it the image is refused.
	MaxCollimatorOffQuadrantDeg = 5.0
	// cosineTol is how far a direction cosine may sit from 0 or ±1 and still
	// count as axis-aligned (about 0.06°).
	cosineTol = 1e-3
)

// defaultOrientation is the RTImageOrientation of an image whose rows run
// along +x and whose columns run along −y of the IEC X-RAY IMAGE RECEPTOR
// system, the orientation assumed when the attribute is absent.
var defaultOrientation = []float64{1, 0, 0, 0, -1, 0}

// axisDir is an axis-aligned direction in the receptor's x, y plane.
type axisDir struct{ x, y int }

// orientation reads RTImageOrientation; absent gives the default. Only
// orientations whose row and column directions lie along ±x or ±y of the
// receptor, perpendicular to each other, are accepted.
func orientation(ds *dicom.Dataset) (row, col axisDir, cos []float64, source string, err error) {
	vs, err := floatsAny(ds, tagRTImageOrientation)
	if err != nil {
		return row, col, nil, "", badTag(kwOrientation, numOrientation, err.Error())
	}
	if vs == nil {
		return axisDir{1, 0}, axisDir{0, -1}, defaultOrientation, "absent: default (1, 0, 0, 0, −1, 0) assumed", nil
	}
	if len(vs) != 6 {
		return row, col, nil, "", badTag(kwOrientation, numOrientation, fmt.Sprintf("%d value(s) %v; expected 6 direction cosines", len(vs), vs))
	}
	unit := func(v float64) (int, bool) {
		switch {
		case math.Abs(v) <= cosineTol:
			return 0, true
		case math.Abs(v-1) <= cosineTol:
			return 1, true
		case math.Abs(v+1) <= cosineTol:
			return -1, true
		}
		return 0, false
	}
	var d [6]int
	for i, v := range vs {
		u, ok := unit(v)
		if !ok {
			return row, col, nil, "", badTag(kwOrientation, numOrientation, fmt.Sprintf("%v is not axis-aligned (value %d is %g): only images whose rows and columns run along the imager's x and y axes are supported", vs, i+1, v))
		}
		d[i] = u
	}
	row, col = axisDir{d[0], d[1]}, axisDir{d[3], d[4]}
	okDir := func(a axisDir, z int) bool { return z == 0 && a.x*a.x+a.y*a.y == 1 }
	if !okDir(row, d[2]) || !okDir(col, d[5]) || row.x*col.x+row.y*col.y != 0 {
		return row, col, nil, "", badTag(kwOrientation, numOrientation, fmt.Sprintf("%v: rows and columns must run along different in-plane axes (x or y) of the imager with no z component", vs))
	}
	return row, col, vs, kwOrientation + " " + numOrientation, nil
}

// floatsAny returns the numbers of element t, nil when absent or empty.
func floatsAny(ds *dicom.Dataset, t tag.Tag) ([]float64, error) {
	e, ferr := ds.FindElementByTag(t)
	if ferr != nil {
		return nil, nil
	}
	vs, err := elemFloats(e)
	if err != nil || len(vs) == 0 {
		return nil, err
	}
	return vs, nil
}

// wrapDeg maps an angle to (−180, 180].
func wrapDeg(a float64) float64 {
	a = math.Mod(a, 360)
	if a > 180 {
		a -= 360
	} else if a <= -180 {
		a += 360
	}
	return a
}

// quadrant returns the nearest of 0, 90, 180, 270° to angle a (degrees) as
// 0..3 and the signed distance from it.
func quadrant(a float64) (q int, off float64) {
	a = math.Mod(a, 360)
	if a < 0 {
		a += 360
	}
	q = int(math.Round(a/90)) % 4
	return q, wrapDeg(a - 90*float64(q))
}

// frameMap maps stored pixel indices (row i, column j) to the analysed
// image, whose columns run along +X and rows along −Y of the IEC BEAM
// LIMITING DEVICE system, so that X1 is on its left, X2 on its right, Y2 at
// its top and Y1 at its bottom for any collimator quadrant.
//
// A stored pixel lies at receptor position P + j·Δc·r + i·Δr·c (r, c the
// row and column directions of RTImageOrientation, P RTImagePosition,
// PS3.3 C.8.8.2). The receptor axes are parallel to the gantry axes when
// XRayImageReceptorAngle is 0. The beam limiting device axes are the gantry
// axes turned by θ about z (IEC 61217; positive θ counter-clockwise seen
// from the source), so a gantry displacement (x, y) has device coordinates
//
//	x_b = x·cosθ + y·sinθ,  y_b = −x·sinθ + y·cosθ
//
// and the analysed column u = x_b/Δu, row v = −y_b/Δv (plus offsets that put
// the first index at 0). With θ a multiple of 90° each of u, v is ±j or ±i.
type frameMap struct {
	rows, cols     int // stored size
	outRows        int
	outCols        int
	uj, ui, vj, vi int // u = uOff + uj·j + ui·i, v = vOff + vj·j + vi·i
	uOff, vOff     int
	rowSp, colSp   float64 // stored spacings (mm, imager plane)
	cosQ, sinQ     int
	row, col       axisDir
}

func newFrameMap(rows, cols int, rowSp, colSp float64, row, col axisDir, q int) frameMap {
	cs := [4][2]int{{1, 0}, {0, 1}, {-1, 0}, {0, -1}}[q]
	m := frameMap{rows: rows, cols: cols, rowSp: rowSp, colSp: colSp, cosQ: cs[0], sinQ: cs[1], row: row, col: col}
	m.uj = row.x*m.cosQ + row.y*m.sinQ
	m.ui = col.x*m.cosQ + col.y*m.sinQ
	m.vj = row.x*m.sinQ - row.y*m.cosQ
	m.vi = col.x*m.sinQ - col.y*m.cosQ
	if m.uj != 0 {
		m.outRows, m.outCols = rows, cols
	} else {
		m.outRows, m.outCols = cols, rows
	}
	off := func(kj, ki int) int {
		if kj < 0 {
			return cols - 1
		}
		if ki < 0 {
			return rows - 1
		}
		return 0
	}
	m.uOff, m.vOff = off(m.uj, m.ui), off(m.vj, m.vi)
	return m
}

// identity says the stored image is already in the analysed frame.
func (m frameMap) identity() bool {
	return m.uj == 1 && m.vi == 1
}

// spacings returns the analysed image's row and column spacings.
func (m frameMap) spacings() (rowSp, colSp float64) {
	if m.uj != 0 {
		return m.rowSp, m.colSp
	}
	return m.colSp, m.rowSp
}

// apply remaps pixels row-major.
func (m frameMap) apply(pix []float64) []float64 {
	if m.identity() {
		return pix
	}
	out := make([]float64, len(pix))
	for i := range m.rows {
		for j := range m.cols {
			u := m.uOff + m.uj*j + m.ui*i
			v := m.vOff + m.vj*j + m.vi*i
			out[v*m.outCols+u] = pix[i*m.cols+j]
		}
	}
	return out
}

// point maps a stored fractional position (row, col) to the analysed image.
func (m frameMap) point(row, col float64) (r, c float64) {
	c = float64(m.uOff) + float64(m.uj)*col + float64(m.ui)*row
	r = float64(m.vOff) + float64(m.vj)*col + float64(m.vi)*row
	return r, c
}

// sides says on which side of the stored image (as displayed) each jaw lies.
func (m frameMap) sides() map[string]string {
	side := func(ex, ey int) string {
		// A receptor direction (ex, ey) points along the stored columns by
		// r·e and along the stored rows by c·e.
		dj := m.row.x*ex + m.row.y*ey
		di := m.col.x*ex + m.col.y*ey
		switch {
		case dj > 0:
			return "right"
		case dj < 0:
			return "left"
		case di > 0:
			return "bottom"
		}
		return "top"
	}
	// +x_b = (cosθ, sinθ), +y_b = (−sinθ, cosθ) in gantry (= receptor) axes.
	return map[string]string{
		EdgeX2: side(m.cosQ, m.sinQ), EdgeX1: side(-m.cosQ, -m.sinQ),
		EdgeY2: side(-m.sinQ, m.cosQ), EdgeY1: side(m.sinQ, -m.cosQ),
	}
}
