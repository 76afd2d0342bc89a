package penumbra

import (
	"context"
	"time"

	"halfmark"
)

// LoadModel loads a beam's penumbra points of one method (the
// method with most points when method is "") up to until (zero: now) and
// fits the model. A model that cannot be fitted is EConflict with the
// reason; an unknown method EInvalid naming "method". It reads through the
// caller's store (s); the fit itself is pure. The API, the dashboard and the
// worker share it.
func LoadModel(ctx context.Context, s halfmark.PenumbraService, beamID int64, method halfmark.Method, until time.Time) (Model, halfmark.PenumbraSet, error) {
	if method == "" {
		counts, err := s.PenumbraMethods(ctx, beamID)
		if err != nil {
			return Model{}, halfmark.PenumbraSet{}, err
		}
		best := 0
		for _, m := range halfmark.Methods {
			if counts[m] > best {
				method, best = m, counts[m]
			}
		}
		if best == 0 {
			return Model{}, halfmark.PenumbraSet{}, halfmark.Errorf(halfmark.EConflict,
				"beam %d has no penumbra measured with an SSD and a depth; record scans at two setups to fit its penumbra model", beamID)
		}
	} else if !method.Valid() {
		return Model{}, halfmark.PenumbraSet{}, halfmark.Invalid("the method is not valid",
			halfmark.FieldError{Field: "method", Message: "must be one of typed, epid, scan, film, other (got \"" + string(method) + "\")"})
	}
	set, err := s.PenumbraPoints(ctx, beamID, method, time.Time{}, until)
	if err != nil {
		return Model{}, set, err
	}
	pts, g, err := FromSet(set)
	if err != nil {
		return Model{}, set, halfmark.Errorf(halfmark.EConflict, "%s", err.Error())
	}
	m, err := Fit(pts, g)
	if err != nil {
		return m, set, halfmark.Errorf(halfmark.EConflict, "the penumbra model of beam %d (%s) cannot be fitted: %s", beamID, method, err.Error())
	}
	m.Method = string(method)
	m.PeriodStart = set.PeriodStart
	return m, set, nil
}
