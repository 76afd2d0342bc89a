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
// (similar triangles; common practice, physics.md). positionMM is in mm and
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

// GeometricPenumbraMM returns the geometric penumbra (mm) at depth depthCm
// below a surface at ssdCm from a source of size sourceSizeMM, cast by a
// collimator edge at sddCm from the source:
//
//	P = S · (SSD + d − SDD) / SDD
//
// (Khan, The Physics of Radiation Therapy — from memory; physics.md). Larger
// sources and longer distances widen it; a collimator nearer the patient
// narrows it. The penumbra is in the measuring plane, not projected to the
// isocentre. Distances in cm; the plane must lie beyond the collimator
// (SSD + d > SDD).
func GeometricPenumbraMM(sourceSizeMM, ssdCm, depthCm, sddCm float64) (float64, error) {
	if err := positive("source size", sourceSizeMM); err != nil {
		return 0, err
	}
	if err := positive("SSD", ssdCm); err != nil {
		return 0, err
	}
	if err := nonNegative("depth", depthCm); err != nil {
		return 0, err
	}
	if err := positive("source-to-collimator distance (SDD)", sddCm); err != nil {
		return 0, err
	}
	if ssdCm+depthCm <= sddCm {
		return 0, fmt.Errorf("%w: the measuring plane (SSD %g + depth %g = %g cm) must lie beyond the collimator at SDD %g cm; check the distances and their units (cm)",
			ErrGeometry, ssdCm, depthCm, ssdCm+depthCm, sddCm)
	}
	return sourceSizeMM * (ssdCm + depthCm - sddCm) / sddCm, nil
}

// CollimatorGeometry describes what sets the geometric penumbra of one beam:
// the effective source (focal spot) size and the distances from the source
// to the jaws and to the MLC, which differ, so jaw-defined and MLC-defined
// edges have different geometric penumbrae.
type CollimatorGeometry struct {
	SourceSizeMM float64 // effective source size, mm
	JawSDDcm     float64 // source to the jaw edge that defines the field, cm
	MLCSDDcm     float64 // source to the MLC leaf ends, cm
}

// Setup is where a profile is measured: the source-to-surface distance and
// the depth of the measuring plane below the surface (0 for a surface or
// in-air measurement).
type Setup struct {
	SSDcm   float64 `json:"ssd_cm"`
	DepthCm float64 `json:"depth_cm"`
}

// PenumbraChange is the geometric penumbra (mm) of jaw- and MLC-defined
// edges in two set-ups and its change, after − before. A measured penumbra
// change close to the predicted one is a set-up change, not a machine
// change.
type PenumbraChange struct {
	JawBeforeMM float64 `json:"jaw_before_mm"`
	JawAfterMM  float64 `json:"jaw_after_mm"`
	JawChangeMM float64 `json:"jaw_change_mm"`
	MLCBeforeMM float64 `json:"mlc_before_mm"`
	MLCAfterMM  float64 `json:"mlc_after_mm"`
	MLCChangeMM float64 `json:"mlc_change_mm"`
}

// PredictPenumbraChange predicts how the geometric penumbra of the same beam
// changes between two set-ups, for jaw-defined and MLC-defined edges, each
// from GeometricPenumbraMM with its own source-to-collimator distance. Only
// the geometric part is predicted; scatter and detector size add to the
// measured penumbra (physics.md).
func PredictPenumbraChange(g CollimatorGeometry, before, after Setup) (PenumbraChange, error) {
	var c PenumbraChange
	var err error
	steps := []struct {
		dst   *float64
		setup Setup
		sdd   float64
		what  string
	}{
		{&c.JawBeforeMM, before, g.JawSDDcm, "jaws, before"},
		{&c.JawAfterMM, after, g.JawSDDcm, "jaws, after"},
		{&c.MLCBeforeMM, before, g.MLCSDDcm, "MLC, before"},
		{&c.MLCAfterMM, after, g.MLCSDDcm, "MLC, after"},
	}
	for _, s := range steps {
		if *s.dst, err = GeometricPenumbraMM(g.SourceSizeMM, s.setup.SSDcm, s.setup.DepthCm, s.sdd); err != nil {
			return PenumbraChange{}, fmt.Errorf("%s: %w", s.what, err)
		}
	}
	c.JawChangeMM = c.JawAfterMM - c.JawBeforeMM
	c.MLCChangeMM = c.MLCAfterMM - c.MLCBeforeMM
	return c, nil
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
