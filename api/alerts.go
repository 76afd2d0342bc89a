package api

import (
	"context"
	"net/http"
	"strconv"
	"strings"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// listAlerts serves GET /api/v1/alerts?machine_id=&series_id=&state=open,acknowledged
// (default: open and acknowledged), most urgent first.
func (h *handlers) listAlerts(c echo.Context) error {
	var f halfmark.AlertFilter
	var fields halfmark.Fields
	for _, q := range []struct {
		name string
		dst  *int64
	}{{"machine_id", &f.MachineID}, {"series_id", &f.SeriesID}} {
		if v := c.QueryParam(q.name); v != "" {
			n, err := strconv.ParseInt(v, 10, 64)
			if err != nil || n <= 0 {
				fields.Add(q.name, "must be a record id (got %q)", v)
			}
			*q.dst = n
		}
	}
	if v := c.QueryParam("state"); v != "" {
		for _, s := range strings.Split(v, ",") {
			st := halfmark.AlertState(strings.TrimSpace(s))
			if st != halfmark.AlertOpen && st != halfmark.AlertAcknowledged && st != halfmark.AlertResolved {
				fields.Add("state", "must be open, acknowledged or resolved, or a comma-separated list of them (got %q)", s)
			}
			f.States = append(f.States, st)
		}
	}
	if err := fields.Err("the alert query is not valid"); err != nil {
		return err
	}
	al, err := h.s.Alerts.Alerts(c.Request().Context(), f)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, map[string]any{"alerts": nonNil(al)})
}

func (h *handlers) getAlert(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	al, err := h.s.Alerts.Alert(c.Request().Context(), id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, al)
}

type alertComment struct {
	Comment string `json:"comment"`
}

// acknowledgeAlert serves POST /api/v1/alerts/{id}/acknowledge {"comment"}.
func (h *handlers) acknowledgeAlert(c echo.Context) error {
	return h.alertAction(c, h.s.Alerts.Acknowledge)
}

// resolveAlert serves POST /api/v1/alerts/{id}/resolve {"comment"}; the
// comment is required.
func (h *handlers) resolveAlert(c echo.Context) error {
	return h.alertAction(c, h.s.Alerts.Resolve)
}

// alertAction moves an alert through its lifecycle with the caller's comment.
func (h *handlers) alertAction(c echo.Context, act func(context.Context, halfmark.Actor, int64, string) (halfmark.Alert, error)) error {
	return lifecycleAction(c, act)
}

// lifecycleAction serves a POST that moves an alert or a finding through
// its lifecycle: the path id, a strict {"comment"} body checked as free
// text (the service also requires it when resolving), the moved record.
func lifecycleAction[T any](c echo.Context, act func(context.Context, halfmark.Actor, int64, string) (T, error)) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	var req alertComment
	if err := decodeJSON(c, &req); err != nil {
		return err
	}
	if err := halfmark.ValidateComment("comment", req.Comment, false); err != nil {
		return err
	}
	out, err := act(c.Request().Context(), actor(c), id, req.Comment)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, out)
}
