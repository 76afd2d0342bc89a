package halfmark

import (
	"context"
	"time"
)

// PenumbraPoint is one measured 80–20 penumbra of one edge, with the setup
// the penumbra model needs.
type PenumbraPoint struct {
	At         time.Time
	SSDcm      float64 // source-to-surface distance, cm
	DepthCm    float64 // depth of the measurement plane, cm
	Geometry   string  // the series geometry ("20×20 cm, SSD 90 d 10")
	Edge       string  // "X1", "B2P30", …
	Method     Method
	PenumbraMM float64 // 80–20 width in the measurement plane, mm
}

// PenumbraSet is what the penumbra model of one beam reads.
type PenumbraSet struct {
	Machine Machine
	Beam    Beam
	// PeriodStart is the start of the baseline period: the newest
	// valid_from of the beam's penumbra baselines at the end of the set;
	// zero when no baseline was ever set (the period starts with the first
	// point).
	PeriodStart time.Time
	Points      []PenumbraPoint // in measurement order
}

// PenumbraService reads the penumbra data of a beam.
type PenumbraService interface {
	// PenumbraMethods counts a beam's penumbra points that carry an SSD and
	// a depth, by method; ENotFound for an unknown beam.
	PenumbraMethods(ctx context.Context, beamID int64) (map[Method]int, error)
	// PenumbraPoints returns the beam, its machine and its penumbra points
	// of one method measured in [from, until) (until zero: no end; from
	// zero: the start of the baseline period in force at until).
	// ENotFound for an unknown beam.
	PenumbraPoints(ctx context.Context, beamID int64, method Method, from, until time.Time) (PenumbraSet, error)
}
