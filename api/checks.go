package api

import (
	"fmt"
	"net/http"
	"strconv"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// checkRequest is the body of POST /api/v1/checks.
type checkRequest struct {
	ID         string         `json:"id"`
	MachineID  ID             `json:"machine_id"`
	BeamID     ID             `json:"beam_id"`
	Kind       string         `json:"kind"`
	MeasuredAt string         `json:"measured_at"`
	Device     string         `json:"device"`
	Operator   string         `json:"operator"`
	Note       string         `json:"note"`
	Setup      halfmark.Setup `json:"setup"`
	Edges      []edgeRequest  `json:"edges"`
	Supersedes string         `json:"supersedes"`
}

type edgeRequest struct {
	Edge            string   `json:"edge"`
	PositionMM      *float64 `json:"position_mm"`
	PenumbraMM      *float64 `json:"penumbra_mm"`
	LightPositionMM *float64 `json:"light_position_mm"`
}

// toCheck converts the request; field errors are collected with prefix.
func (r *checkRequest) toCheck(prefix string, f *halfmark.Fields) halfmark.Check {
	c := halfmark.Check{ID: r.ID, MachineID: int64(r.MachineID), BeamID: int64(r.BeamID), Kind: halfmark.CheckKind(r.Kind),
		Device: r.Device, Operator: r.Operator, Note: r.Note, Setup: r.Setup, Supersedes: r.Supersedes}
	if r.MeasuredAt != "" {
		t, err := time.Parse(time.RFC3339Nano, r.MeasuredAt)
		if err != nil {
			f.Add(prefix+"measured_at", "%q is not an RFC 3339 time such as 2026-03-02T07:45:00+01:00", r.MeasuredAt)
			t = time.Date(2000, 1, 1, 0, 0, 0, 0, time.UTC) // placeholder so the missing-time message does not repeat
		}
		c.MeasuredAt = t
	}
	for i, e := range r.Edges {
		if e.PositionMM == nil {
			f.Add(fmt.Sprintf("%sedges[%d].position_mm", prefix, i), "is required: the distance in mm from the central axis to the 50%% point")
			continue
		}
		c.Edges = append(c.Edges, halfmark.EdgeResult{Edge: e.Edge, PositionMM: *e.PositionMM, PenumbraMM: e.PenumbraMM, LightPositionMM: e.LightPositionMM})
	}
	return c
}

func (h *handlers) createCheck(c echo.Context) error {
	var req checkRequest
	if err := decodeJSON(c, &req); err != nil {
		return err
	}
	var f halfmark.Fields
	chk := req.toCheck("", &f)
	if err := f.Err("the check is not valid; nothing was stored"); err != nil {
		return err
	}
	stored, created, err := h.s.Checks.RecordCheck(c.Request().Context(), actor(c), &chk)
	if err != nil {
		return err
	}
	status := http.StatusOK
	if created {
		status = http.StatusCreated
		c.Response().Header().Set(echo.HeaderLocation, "/api/v1/checks/"+stored.ID)
		h.countIngest(1, len(stored.Edges))
	}
	return c.JSON(status, stored)
}

type batchRequest struct {
	Checks []checkRequest `json:"checks"`
}

func (h *handlers) createBatch(c echo.Context) error {
	var req batchRequest
	if err := decodeJSON(c, &req); err != nil {
		return err
	}
	var f halfmark.Fields
	cs := make([]halfmark.Check, len(req.Checks))
	for i := range req.Checks {
		cs[i] = req.Checks[i].toCheck(fmt.Sprintf("checks[%d].", i), &f)
	}
	if err := f.Err("the batch is not valid; nothing was stored"); err != nil {
		return err
	}
	res, err := h.s.Checks.RecordBatch(c.Request().Context(), actor(c), cs)
	if err != nil {
		return err
	}
	status := http.StatusOK
	if res.Created > 0 {
		status = http.StatusCreated
		edges := 0
		for i := range cs {
			edges += len(cs[i].Edges)
		}
		// Replays inside a batch are rare; their edges are left out in proportion.
		h.countIngest(res.Created, edges*res.Created/len(cs))
	}
	return c.JSON(status, res)
}

func (h *handlers) getCheck(c echo.Context) error {
	id, err := pathCheckID(c)
	if err != nil {
		return err
	}
	chk, err := h.s.Checks.Check(c.Request().Context(), id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, chk)
}

func (h *handlers) listChecks(c echo.Context) error {
	q := c.QueryParams()
	var f halfmark.CheckFilter
	var fe halfmark.Fields
	intParam := func(name string) int64 {
		s := q.Get(name)
		if s == "" {
			return 0
		}
		n, err := strconv.ParseInt(s, 10, 64)
		if err != nil || n < 0 {
			fe.Add(name, "must be a positive integer (got %q)", s)
		}
		return n
	}
	timeParam := func(name string) time.Time {
		s := q.Get(name)
		if s == "" {
			return time.Time{}
		}
		t, err := time.Parse(time.RFC3339, s)
		if err != nil {
			fe.Add(name, "must be an RFC 3339 time (got %q)", s)
		}
		return t
	}
	f.MachineID = intParam("machine_id")
	f.BeamID = intParam("beam_id")
	f.Limit = int(intParam("limit"))
	f.Kind = halfmark.CheckKind(q.Get("kind"))
	if f.Kind != "" && !f.Kind.Valid() {
		fe.Add("kind", "must be one of morning, monthly, annual, commissioning, post-service")
	}
	f.From, f.To = timeParam("from"), timeParam("to")
	if err := fe.Err("the query is not valid"); err != nil {
		return err
	}
	cs, err := h.s.Checks.Checks(c.Request().Context(), f)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, map[string]any{"checks": nonNil(cs)})
}

// countIngest adds newly stored checks and edge results to the metrics.
func (h *handlers) countIngest(checks, edges int) {
	if h.s.Metrics != nil {
		h.s.Metrics.Checks.Add(float64(checks))
		h.s.Metrics.Edges.Add(float64(edges))
	}
}
