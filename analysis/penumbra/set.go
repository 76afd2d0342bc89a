package penumbra

import (
	"fmt"

	"halfmark"
)

// FromSet turns a beam's stored penumbra data into model points and the
// machine's collimator geometry. It refuses a machine with no recorded
// collimator geometry, saying how to record it.
func FromSet(set halfmark.PenumbraSet) ([]Point, Geometry, error) {
	if set.Machine.Collimators == nil {
		return nil, Geometry{}, fmt.Errorf("machine %s has no collimator geometry; record which jaw pair is upper and the source distances of the jaws and the MLC (PATCH /api/v1/machines/%d with \"collimators\")",
			set.Machine.Name, set.Machine.ID)
	}
	g := GeometryOf(*set.Machine.Collimators)
	out := make([]Point, 0, len(set.Points))
	for _, p := range set.Points {
		c, err := g.CollimatorOf(p.Edge)
		if err != nil {
			return nil, g, err
		}
		if g.SCD(c) <= 0 {
			continue // an MLC edge on a machine recorded without an MLC distance
		}
		out = append(out, Point{ValueMM: p.PenumbraMM, SSDcm: p.SSDcm, DepthCm: p.DepthCm, Collimator: c, Edge: p.Edge,
			Setup: p.Geometry, Method: string(p.Method), At: p.At})
	}
	return out, g, nil
}
