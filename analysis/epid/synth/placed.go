package synth

import (
	"math"

	"github.com/suyashkumar/dicom/pkg/tag"
)

// Placement is how the imager sits in the beam, in the terms of the DICOM
// RT Image module (PS3.3 C.8.8.2):
//
//   - PositionMM is RTImagePosition (3002,0012): x, y (mm) of the centre of
//     the first transmitted pixel in the IEC X-RAY IMAGE RECEPTOR system.
//   - TranslationMM is XRayImageReceptorTranslation (3002,000D): x, y, z (mm)
//     of the origin of that system in the IEC GANTRY system.
//   - RowDir and ColDir are the receptor x, y direction cosines of the first
//     row and the first column (RTImageOrientation (3002,0010), z = 0).
//   - CollimatorDeg is BeamLimitingDeviceAngle (300A,0120): the IEC BEAM
//     LIMITING DEVICE axes are the gantry axes turned by θ about z,
//     counter-clockwise seen from the source (IEC 61217).
//
// The receptor angle is 0, so receptor and gantry axes are parallel. A
// stored pixel (row i, column j) lies at gantry position
//
//	g = P + j·Δ·RowDir + i·Δ·ColDir + T      (imager plane, mm)
//
// which projects to the isocentre plane by SAD/SID, and in beam limiting
// device axes
//
//	x_b = x·cosθ + y·sinθ,  y_b = −x·sinθ + y·cosθ
type Placement struct {
	PositionMM    [2]float64
	TranslationMM [3]float64
	RowDir        [2]float64
	ColDir        [2]float64
	CollimatorDeg float64
}

// DefaultPlacement centres the imager on the beam axis with rows along +x,
// columns along −y and the collimator at 0°.
func DefaultPlacement(g Imager) Placement {
	return Placement{
		PositionMM: [2]float64{-float64(g.Cols-1) / 2 * g.SpacingMM, float64(g.Rows-1) / 2 * g.SpacingMM},
		RowDir:     [2]float64{1, 0},
		ColDir:     [2]float64{0, -1},
	}
}

// TagRTImagePosition and friends are the placement attributes.
var (
	TagRTImagePosition              = tag.Tag{Group: 0x3002, Element: 0x0012}
	TagXRayImageReceptorTranslation = tag.Tag{Group: 0x3002, Element: 0x000D}
	TagXRayImageReceptorAngle       = tag.Tag{Group: 0x3002, Element: 0x000E}
	TagRTImageOrientation           = tag.Tag{Group: 0x3002, Element: 0x0010}
)

// Tags returns the placement as RT Image attribute values for RTImage.Set.
func (p Placement) Tags() map[tag.Tag]any {
	return map[tag.Tag]any{
		TagRTImagePosition:              strs(num(p.PositionMM[0]), num(p.PositionMM[1])),
		TagXRayImageReceptorTranslation: strs(num(p.TranslationMM[0]), num(p.TranslationMM[1]), num(p.TranslationMM[2])),
		TagRTImageOrientation:           strs(num(p.RowDir[0]), num(p.RowDir[1]), "0", num(p.ColDir[0]), num(p.ColDir[1]), "0"),
		TagBeamLimitingDevAngle:         strs(num(p.CollimatorDeg)),
	}
}

// beamCoords returns the beam-limiting-device coordinates (mm at the
// isocentre) of stored pixel (i, j) on imager g.
func (p Placement) beamCoords(g Imager, i, j int) (xb, yb float64) {
	d := g.SpacingMM
	x := p.PositionMM[0] + float64(j)*d*p.RowDir[0] + float64(i)*d*p.ColDir[0] + p.TranslationMM[0]
	y := p.PositionMM[1] + float64(j)*d*p.RowDir[1] + float64(i)*d*p.ColDir[1] + p.TranslationMM[1]
	s := g.SADmm / g.SIDmm
	x, y = x*s, y*s
	th := p.CollimatorDeg * math.Pi / 180
	cs, sn := math.Cos(th), math.Sin(th)
	return x*cs + y*sn, -x*sn + y*cs
}

// PixelsPlaced renders the field (RotDeg and noise ignored) on g placed by
// p: the stored rows and columns follow p's orientation, and the jaws are
// X1, X2 along x_b and Y1, Y2 along y_b.
func (f Field) PixelsPlaced(g Imager, p Placement) []float64 {
	pix := make([]float64, g.Rows*g.Cols)
	for i := range g.Rows {
		for j := range g.Cols {
			x, y := p.beamCoords(g, i, j)
			v := (Phi((x+f.X1)/f.Sigma) - Phi((x-f.X2)/f.Sigma)) * (Phi((y+f.Y1)/f.Sigma) - Phi((y-f.Y2)/f.Sigma))
			pix[i*g.Cols+j] = f.Bg + f.Amp*v
		}
	}
	return pix
}

// PixelsPlaced renders the picket fence (RotDeg, Shift and noise ignored)
// on g placed by p: leaves travel along x_b, pair 1 is on the +y_b (Y2)
// side, bank 1 tips on the −x_b side of each strip.
func (k Picket) PixelsPlaced(g Imager, p Placement) []float64 {
	total := 0.0
	for _, w := range k.LeafWidthsMM {
		total += w
	}
	pix := make([]float64, g.Rows*g.Cols)
	for i := range g.Rows {
		for j := range g.Cols {
			x, y := p.beamCoords(g, i, j)
			pair, top := 0, total/2
			for n, w := range k.LeafWidthsMM {
				if y <= top && y > top-w {
					pair = n + 1
					break
				}
				top -= w
			}
			v := 0.0
			if pair > 0 {
				for n, xc := range k.Pickets {
					l := xc - k.Width/2 + k.Err1[[2]int{pair, n}]
					r := xc + k.Width/2 + k.Err2[[2]int{pair, n}]
					v += Phi((x-l)/k.Sigma) - Phi((x-r)/k.Sigma)
				}
			}
			jaw := Phi((y+k.YJaw)/k.Sigma) - Phi((y-k.YJaw)/k.Sigma)
			pix[i*g.Cols+j] = k.Bg + k.Amp*v*jaw
		}
	}
	return pix
}
