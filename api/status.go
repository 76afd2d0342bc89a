package api

import (
	"context"
	"net/http"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// ChartService evaluates one series now and returns its chart document
// (points with their statistics, baseline, limits, verdict); ENotFound
// when the series does not exist. The worker implements it.
type ChartService interface {
	Chart(ctx context.Context, seriesID int64) (any, error)
}

// status serves GET /api/v1/status: machines most urgent first.
func (h *handlers) status(c echo.Context) error {
	st, err := h.s.Status.Status(c.Request().Context())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, map[string]any{"machines": nonNil(st)})
}

// seriesChart serves GET /api/v1/series/{id}/chart.
func (h *handlers) seriesChart(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	if h.s.Charts == nil {
		return halfmark.Errorf(halfmark.EUnavailable, "charts need the drift engine, which this server was started without")
	}
	ch, err := h.s.Charts.Chart(c.Request().Context(), id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, ch)
}
