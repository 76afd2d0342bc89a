// Package analysis holds Halfmark's pure computations on beam data:
// profiles (analysis/profile), images, control charts, and, in this file,
// the geometry of a measurement set-up.
package analysis

import (
	"errors"
	"fmt"
	"math"
)

// ErrGeometry is wrapped by every error for an impossible set-up (a
// non-positive or non-finite distance, a measuring plane not beyond the
// collimator).
var ErrGeometry = errors.New("analysis: invalid geometry")

// ProjectToIsocentre scales a position measured in a plane at distance
// SSD + depth from the source to the isocentre plane at SAD:
//
//	x_iso = x · SAD / (SSD + depth)
//
// (similar triangles; common practice). positionMM is in mm and
// the result is in mm; sadCm, ssdCm and depthCm are in cm. SAD and SSD must
// be positive and depth non-negative.
func ProjectToIsocentre(positionMM, sadCm, ssdCm, depthCm float64) (float64, error) {
	if err := finite("position", positionMM, "mm"); err != nil {
		return 0, err
	}
	if err := positive("SAD", sadCm); err != nil {
		return 0, err
	}
	if err := positive("SSD", ssdCm); err != nil {
		return 0, err
	}
	if err := nonNegative("depth", depthCm); err != nil {
		return 0, err
	}
	return positionMM * sadCm / (ssdCm + depthCm), nil
}

func finite(name string, v float64, unit string) error {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return fmt.Errorf("%w: %s is %g %s; give a finite number", ErrGeometry, name, v, unit)
	}
	return nil
}

func positive(name string, v float64) error {
	if !(v > 0) || math.IsInf(v, 0) {
		return fmt.Errorf("%w: %s is %g; it must be a positive, finite distance", ErrGeometry, name, v)
	}
	return nil
}

func nonNegative(name string, v float64) error {
	if !(v >= 0) || math.IsInf(v, 0) {
		return fmt.Errorf("%w: %s is %g; it must be zero or a positive, finite distance", ErrGeometry, name, v)
	}
	return nil
}
