package api

import (
	"context"
	"net/http"
	"sort"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
)

func (h *handlers) machineSeries(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	ss, err := h.s.Series.MachineSeries(c.Request().Context(), id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, map[string]any{"series": nonNil(ss)})
}

func (h *handlers) getSeries(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	s, err := h.s.Series.Series(c.Request().Context(), id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, s)
}

func (h *handlers) seriesPoints(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	ps, err := h.s.Series.Points(c.Request().Context(), id)
	if err != nil {
		return err
	}
	if cr, ok := h.s.Series.(CorrectedPointsReader); ok {
		corrected, err := cr.CorrectedPoints(c.Request().Context(), id)
		if err != nil {
			return err
		}
		ps = append(ps, corrected...)
		sort.SliceStable(ps, func(i, j int) bool { return ps[i].MeasuredAt.Before(ps[j].MeasuredAt) })
	}
	return c.JSON(http.StatusOK, map[string]any{"series_id": id, "points": nonNil(ps)})
}

// CorrectedPointsReader gives the points of a series whose checks were
// corrected (db.DB implements it). The points route shows them, marked
// "corrected" with "superseded_by" and "correction_reason", beside the
// current points, so that a correction never hides a record.
type CorrectedPointsReader interface {
	CorrectedPoints(ctx context.Context, seriesID int64) ([]halfmark.Point, error)
}

func (h *handlers) listBaselines(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	if _, err := h.s.Series.Series(c.Request().Context(), id); err != nil {
		return err
	}
	bs, err := h.s.Series.Baselines(c.Request().Context(), id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, map[string]any{"baselines": nonNil(bs)})
}

type baselineRequest struct {
	ValueMM   *float64 `json:"value_mm"`
	SigmaMM   *float64 `json:"sigma_mm"`
	ValidFrom string   `json:"valid_from"`
	Reason    string   `json:"reason"`
	Source    string   `json:"source"`
}

// setBaseline stores a new baseline version. Without value_mm it starts a
// new period whose value is estimated from its first points.
func (h *handlers) setBaseline(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	var req baselineRequest
	if err := decodeJSON(c, &req); err != nil {
		return err
	}
	b := halfmark.Baseline{SeriesID: id, ValueMM: req.ValueMM, SigmaMM: req.SigmaMM, Reason: req.Reason, Source: halfmark.BaselineSet}
	if req.ValueMM == nil {
		b.Source = halfmark.BaselineService
	}
	switch req.Source {
	case "":
	case string(halfmark.BaselineSet), string(halfmark.BaselineService):
		b.Source = halfmark.BaselineSource(req.Source)
	default:
		return halfmark.Invalid("the baseline is not valid", halfmark.FieldError{Field: "source", Message: "must be \"set\" or \"service\""})
	}
	if req.ValidFrom == "" {
		b.ValidFrom = h.s.Now()
	} else if t, err := time.Parse(time.RFC3339Nano, req.ValidFrom); err == nil {
		b.ValidFrom = t
	} else {
		return halfmark.Invalid("the baseline is not valid", halfmark.FieldError{Field: "valid_from", Message: "must be an RFC 3339 time"})
	}
	if err := h.s.Series.SetBaseline(c.Request().Context(), actor(c), &b); err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, b)
}

func (h *handlers) listAudit(c echo.Context) error {
	es, err := h.s.Audit.Audit(c.Request().Context(), c.QueryParam("entity"), c.QueryParam("entity_id"), 500)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, map[string]any{"entries": nonNil(es)})
}
