package api

import (
	"context"
	"net/http"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// EventService stores and lists service events; db.DB implements it.
type EventService interface {
	// CreateServiceEvent stores an event and, with NewBaseline, starts a
	// new baseline period for the named edges (all when none).
	CreateServiceEvent(ctx context.Context, a halfmark.Actor, ev *halfmark.ServiceEvent) error
	// ServiceEvents lists a machine's events, newest first.
	ServiceEvents(ctx context.Context, machineID int64) ([]halfmark.ServiceEvent, error)
}

type serviceEventRequest struct {
	At          string   `json:"at"`
	Note        string   `json:"note"`
	Edges       []string `json:"edges"`
	NewBaseline bool     `json:"new_baseline"`
}

// createServiceEvent serves POST /api/v1/machines/{id}/service-events.
// Without "at" the event is dated now.
func (h *handlers) createServiceEvent(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	var req serviceEventRequest
	if err := decodeJSON(c, &req); err != nil {
		return err
	}
	ev := halfmark.ServiceEvent{MachineID: id, Note: req.Note, Edges: req.Edges, NewBaseline: req.NewBaseline, At: h.s.Now()}
	if req.At != "" {
		t, err := time.Parse(time.RFC3339Nano, req.At)
		if err != nil {
			return halfmark.Invalid("the service event is not valid", halfmark.FieldError{Field: "at", Message: "must be an RFC 3339 time, e.g. 2026-03-02T14:00:00+01:00"})
		}
		ev.At = t
	}
	if ev.Edges == nil {
		ev.Edges = []string{}
	}
	if err := h.s.Events.CreateServiceEvent(c.Request().Context(), actor(c), &ev); err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, ev)
}

// listServiceEvents serves GET /api/v1/machines/{id}/service-events.
func (h *handlers) listServiceEvents(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	evs, err := h.s.Events.ServiceEvents(c.Request().Context(), id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, map[string]any{"service_events": nonNil(evs)})
}
