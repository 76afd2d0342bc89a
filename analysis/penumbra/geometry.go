package penumbra

import (
	"fmt"
	"math"

	"halfmark"
)

// K8020 is the 80–20 width of a Gaussian edge in units of its standard
// deviation: 2·Φ⁻¹(0.8) = 1.6832 (derived from the normal quantiles;
// physics reference "Definitions (profiles)").
const K8020 = 1.6832

// Collimator is the beam-limiting device that forms an edge.
type Collimator string

// The collimators of a C-arm linac head.
const (
	Upper Collimator = "upper" // the jaw pair nearer the source
	Lower Collimator = "lower" // the jaw pair nearer the patient
	MLC   Collimator = "mlc"   // the multileaf collimator
)

// Collimators lists the collimators from the source downwards (by name).
var Collimators = []Collimator{Upper, Lower, MLC}

// Valid reports whether c is a known collimator.
func (c Collimator) Valid() bool { return c == Upper || c == Lower || c == MLC }

// Label is how a physicist names the collimator: "upper jaws".
func (c Collimator) Label() string {
	switch c {
	case Upper:
		return "upper jaws"
	case Lower:
		return "lower jaws"
	case MLC:
		return "MLC"
	}
	return string(c)
}

// Geometry holds the source-to-collimator distances of a machine, cm.
// MLCSCDcm is 0 when the machine has no MLC.
type Geometry struct {
	UpperJaws  string  // "X" or "Y": the jaw pair nearer the source
	UpperSCDcm float64 // source to the upper jaws, cm
	LowerSCDcm float64 // source to the lower jaws, cm
	MLCSCDcm   float64 // source to the MLC, cm (0: no MLC)
}

// GeometryOf reads a machine's collimator record.
func GeometryOf(c halfmark.Collimators) Geometry {
	return Geometry{UpperJaws: c.UpperJaws, UpperSCDcm: c.UpperSCDcm, LowerSCDcm: c.LowerSCDcm, MLCSCDcm: c.MLCSCDcm}
}

// SCD returns the source-to-collimator distance of c, cm; 0 when unknown.
func (g Geometry) SCD(c Collimator) float64 {
	switch c {
	case Upper:
		return g.UpperSCDcm
	case Lower:
		return g.LowerSCDcm
	case MLC:
		return g.MLCSCDcm
	}
	return 0
}

// CollimatorOf says which collimator forms edge: X1/X2 and Y1/Y2 are the
// upper or lower jaws according to g.UpperJaws; MLC leaf ends (B1P23) are
// the MLC.
func (g Geometry) CollimatorOf(edge string) (Collimator, error) {
	e, err := halfmark.ParseEdge(edge)
	if err != nil {
		return "", err
	}
	if e.Jaw == "" {
		return MLC, nil
	}
	if g.UpperJaws != "X" && g.UpperJaws != "Y" {
		return "", fmt.Errorf("the machine does not say which jaw pair is the upper one (upper_jaws X or Y)")
	}
	if e.Axis() == g.UpperJaws {
		return Upper, nil
	}
	return Lower, nil
}

// Magnification is the geometric factor of an edge formed at scdCm and
// seen at the plane ssdCm + depthCm (all cm):
//
//	M = (SSD + d − SCD)/SCD
//
// (Khan, The Physics of Radiation Therapy, geometric penumbra — from
// memory). It is NaN unless 0 < SCD ≤ SSD + d.
func Magnification(ssdCm, depthCm, scdCm float64) float64 {
	if !(scdCm > 0) || !(ssdCm+depthCm >= scdCm) {
		return math.NaN()
	}
	return (ssdCm + depthCm - scdCm) / scdCm
}

// GeometricPenumbra is the geometric penumbra of a source of diameter S
// (any length unit; the result is in the same unit) through a collimator
// at source-to-diaphragm distance sdd, at depth d below a surface at ssd
// (cm):
//
//	P = S·(SSD + d − SDD)/SDD
//
// (Khan, The Physics of Radiation Therapy — from memory).
func GeometricPenumbra(s, ssdCm, depthCm, sddCm float64) float64 {
	return s * Magnification(ssdCm, depthCm, sddCm)
}

// SourceWidth8020 is the 80–20 width (mm) of the blur of a Gaussian source
// of standard deviation sigmaMM projected with magnification m:
// 1.6832·σ_s·M (derived).
func SourceWidth8020(sigmaMM, m float64) float64 { return K8020 * sigmaMM * m }
