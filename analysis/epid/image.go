package epid

import (
	"fmt"
	"math"
)

// Image is one greyscale portal image.
//
// Pix holds Rows·Cols values row-major (index row·Cols + col). RowSpacingMM is
// the distance between the centres of adjacent rows and ColSpacingMM between
// adjacent columns, both in mm in the imager plane (at SIDmm from the source).
// When SIDmm and SADmm are both zero the spacings are taken as already in the
// isocentre plane (scale 1); otherwise both must be positive.
type Image struct {
	Rows, Cols   int
	Pix          []float64
	RowSpacingMM float64 // mm between row centres in the imager plane
	ColSpacingMM float64 // mm between column centres in the imager plane
	SIDmm        float64 // source-to-imager distance, mm (RTImageSID)
	SADmm        float64 // source-to-axis distance, mm (RadiationMachineSAD)

	// AxisRow, AxisCol locate the beam central axis in pixel coordinates
	// (fractional; pixel centres are integers). Used only when HasAxis is
	// true; otherwise the axis is the image centre ((Rows-1)/2, (Cols-1)/2).
	AxisRow, AxisCol float64
	HasAxis          bool
	// AxisSource says where the axis came from (set by DecodeDICOM).
	AxisSource string
	// Geometry records how DecodeDICOM placed the image (nil for images
	// built otherwise). When set, Pix is already in the analysed frame: X1
	// on the left, X2 on the right, Y2 at the top, for the collimator
	// quadrant it names.
	Geometry *GeometryUsed

	GantryDeg     *float64 // GantryAngle (300A,011E), degrees; nil when unknown
	CollimatorDeg *float64 // BeamLimitingDeviceAngle (300A,0120), degrees; nil when unknown

	// Inverted says the stored values fall as dose rises (DICOM
	// PhotometricInterpretation MONOCHROME1, or set by the caller). Analysis
	// checks this against the image itself (see InvertMode).
	Inverted bool

	Modality string   // DICOM Modality, when decoded from DICOM
	Source   string   // where the geometry came from, for the record
	Warnings []string // notes from decoding, copied into analysis results
}

// FromArray builds an Image from a [rows][cols] array whose spacings are given
// in the isocentre plane (mm). SIDmm and SADmm are left zero (scale 1); set
// them, and give imager-plane spacings instead, for an image at the imager.
// Every row must have the same length; values must be finite.
func FromArray(a [][]float64, rowSpacingMM, colSpacingMM float64) (Image, error) {
	if len(a) == 0 || len(a[0]) == 0 {
		return Image{}, fmt.Errorf("%w: empty array: give at least %d×%d values", ErrInvalidImage, minSide, minSide)
	}
	rows, cols := len(a), len(a[0])
	pix := make([]float64, 0, rows*cols)
	for r, row := range a {
		if len(row) != cols {
			return Image{}, fmt.Errorf("%w: row %d has %d values but row 0 has %d: every row must have the same length", ErrInvalidImage, r, len(row), cols)
		}
		pix = append(pix, row...)
	}
	im := Image{Rows: rows, Cols: cols, Pix: pix, RowSpacingMM: rowSpacingMM, ColSpacingMM: colSpacingMM, Source: "array"}
	if err := im.Validate(); err != nil {
		return Image{}, err
	}
	return im, nil
}

// minSide is the smallest image side (pixels) the analyses accept.
const minSide = 16

// Validate checks sizes, spacings, distances, the axis and that every pixel is
// finite. The error names the bad value.
func (im Image) Validate() error {
	if im.Rows < minSide || im.Cols < minSide {
		return fmt.Errorf("%w: image is %d×%d pixels; need at least %d×%d", ErrInvalidImage, im.Rows, im.Cols, minSide, minSide)
	}
	if len(im.Pix) != im.Rows*im.Cols {
		return fmt.Errorf("%w: Pix has %d values but Rows×Cols = %d×%d = %d", ErrInvalidImage, len(im.Pix), im.Rows, im.Cols, im.Rows*im.Cols)
	}
	if !(im.RowSpacingMM > 0 && im.RowSpacingMM < 100) || !(im.ColSpacingMM > 0 && im.ColSpacingMM < 100) {
		return fmt.Errorf("%w: pixel spacing %g mm (rows) × %g mm (columns): each must be > 0 and < 100 mm", ErrInvalidImage, im.RowSpacingMM, im.ColSpacingMM)
	}
	switch {
	case im.SIDmm == 0 && im.SADmm == 0:
	case !(im.SIDmm > 0 && im.SIDmm < 1e5) || !(im.SADmm > 0 && im.SADmm < 1e5):
		return fmt.Errorf("%w: SID %g mm, SAD %g mm: both must be positive (or both zero for spacings already at the isocentre)", ErrInvalidImage, im.SIDmm, im.SADmm)
	}
	if im.HasAxis {
		if !(im.AxisRow >= 0 && im.AxisRow <= float64(im.Rows-1)) || !(im.AxisCol >= 0 && im.AxisCol <= float64(im.Cols-1)) {
			return fmt.Errorf("%w: central axis at row %.1f, column %.1f lies outside the %d×%d image", ErrInvalidImage, im.AxisRow, im.AxisCol, im.Rows, im.Cols)
		}
	}
	for i, v := range im.Pix {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("%w: pixel at row %d, column %d is %v; all values must be finite", ErrInvalidImage, i/im.Cols, i%im.Cols, v)
		}
	}
	return nil
}

// IsoScale is the factor from the imager plane to the isocentre plane,
// SAD/SID (physics.md, common practice), or 1 when both are zero.
func (im Image) IsoScale() float64 {
	if im.SIDmm == 0 && im.SADmm == 0 {
		return 1
	}
	return im.SADmm / im.SIDmm
}

// PixelSizeIsoMM returns the column (x) and row (y) pixel sizes in mm in the
// isocentre plane: spacing·SAD/SID.
func (im Image) PixelSizeIsoMM() (x, y float64) {
	s := im.IsoScale()
	return im.ColSpacingMM * s, im.RowSpacingMM * s
}

// Axis returns the central-axis pixel coordinates (row, column) and a short
// description of where they came from.
func (im Image) Axis() (row, col float64, source string) {
	if im.HasAxis {
		src := im.AxisSource
		if src == "" {
			src = "RTImagePosition"
		}
		return im.AxisRow, im.AxisCol, src
	}
	return float64(im.Rows-1) / 2, float64(im.Cols-1) / 2, "image centre"
}

// InvertMode says how analysis decides whether the greyscale is inverted.
type InvertMode int

const (
	// InvertAuto (default) measures it: the field (or picket strips) must be
	// brighter than the background. Image.Inverted is only a hint; a warning
	// is given when the image contradicts it.
	InvertAuto InvertMode = iota
	// InvertFromImage trusts Image.Inverted without looking.
	InvertFromImage
	// InvertNever analyses the stored values as they are.
	InvertNever
	// InvertAlways flips the stored values.
	InvertAlways
)

// signal maps a stored value v to a value that rises with dose:
// off + sign·v. For a flipped image sign = -1 and off = max(Pix), so the
// signal stays non-negative.
type signal struct {
	sign, off float64
}

func (s signal) of(v float64) float64 { return s.off + s.sign*v }

func newSignal(im Image, flip bool) signal {
	if !flip {
		return signal{sign: 1}
	}
	m := math.Inf(-1)
	for _, v := range im.Pix {
		if v > m {
			m = v
		}
	}
	return signal{sign: -1, off: m}
}
