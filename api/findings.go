package api

import (
	"context"
	"net/http"
	"strconv"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// listFindings serves GET /api/v1/findings?state=active|open|acknowledged|resolved|all&machine_id=N
// (default active: open or acknowledged), most urgent first.
func (h *handlers) listFindings(c echo.Context) error {
	var f halfmark.FindingFilter
	var fields halfmark.Fields
	if v := c.QueryParam("machine_id"); v != "" {
		n, err := strconv.ParseInt(v, 10, 64)
		if err != nil || n <= 0 {
			fields.Add("machine_id", "must be a machine id (got %q)", v)
		}
		f.MachineID = n
	}
	st, err := halfmark.ParseFindingState(c.QueryParam("state"))
	if err != nil {
		fields.Add("state", "%s", err.Error())
	}
	f.State = st
	if err := fields.Err("the finding query is not valid"); err != nil {
		return err
	}
	if h.s.Findings == nil {
		return halfmark.Errorf(halfmark.EUnavailable, "findings need the drift engine's store, which this server was started without")
	}
	fs, err := h.s.Findings.Findings(c.Request().Context(), f)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, map[string]any{"findings": nonNil(fs)})
}

// getFinding serves GET /api/v1/findings/{id}.
func (h *handlers) getFinding(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	if h.s.Findings == nil {
		return halfmark.Errorf(halfmark.EUnavailable, "findings need the drift engine's store, which this server was started without")
	}
	f, err := h.s.Findings.Finding(c.Request().Context(), id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, f)
}

// acknowledgeFinding serves POST /api/v1/findings/{id}/acknowledge
// {"comment"}: the finding and its evidence alerts.
func (h *handlers) acknowledgeFinding(c echo.Context) error {
	return h.findingAction(c, h.s.Findings.AcknowledgeFinding)
}

// resolveFinding serves POST /api/v1/findings/{id}/resolve {"comment"};
// the comment is required.
func (h *handlers) resolveFinding(c echo.Context) error {
	return h.findingAction(c, h.s.Findings.ResolveFinding)
}

func (h *handlers) findingAction(c echo.Context, act func(context.Context, halfmark.Actor, int64, string) (halfmark.Finding, error)) error {
	return lifecycleAction(c, act)
}

// SeriesChartDocument is the answer of GET /api/v1/series/{id}/chart: the
// series and the drift engine's stored evaluation of it, chart included.
// It is read, never computed here.
type SeriesChartDocument struct {
	Series     halfmark.Series           `json:"series"`
	Evaluation halfmark.SeriesEvaluation `json:"evaluation"`
}

// seriesChart serves GET /api/v1/series/{id}/chart.
func (h *handlers) seriesChart(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	if h.s.Evaluations == nil {
		return halfmark.Errorf(halfmark.EUnavailable, "charts need the drift engine's store, which this server was started without")
	}
	ctx := c.Request().Context()
	s, err := h.s.Series.Series(ctx, id)
	if err != nil {
		return err
	}
	ev, err := h.s.Evaluations.SeriesEvaluation(ctx, id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, SeriesChartDocument{Series: s, Evaluation: ev})
}
