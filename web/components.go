package web

import (
	"context"
	"net/http"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// ServiceEventCreator records a service event; with a component and
// NewBaseline it starts a new baseline period for every series of that
// component (db.DB implements it).
type ServiceEventCreator interface {
	CreateServiceEvent(ctx context.Context, a halfmark.Actor, ev *halfmark.ServiceEvent) error
}

// bulkAcknowledger acknowledges every open finding of a machine.
type bulkAcknowledger interface {
	AcknowledgeMachineFindings(ctx context.Context, a halfmark.Actor, machineID int64, comment string) (int, error)
}

// componentOption is one component a service can name on the machine page.
type componentOption struct {
	Value, Label string
}

// machineComponents lists the components of a machine that have series:
// its jaws, light fields, MLC banks and each beam's penumbra.
func machineComponents(views []seriesView, beams []halfmark.Beam) []componentOption {
	label := map[int64]string{}
	for _, b := range beams {
		label[b.ID] = b.Label
	}
	seen := map[halfmark.Component]bool{}
	var out []componentOption
	for _, v := range views {
		for _, c := range halfmark.ComponentsOf(v.S.Quantity, v.S.Edge, label[v.S.BeamID]) {
			if c.Kind == halfmark.ComponentMLCLeaf || seen[c] {
				continue
			}
			seen[c] = true
			out = append(out, componentOption{Value: string(c.Kind) + "|" + c.Name, Label: c.Label()})
		}
	}
	slices.SortFunc(out, func(a, b componentOption) int { return strings.Compare(a.Label, b.Label) })
	return out
}

// componentService serves POST /machines/{id}/service: a service note on
// one whole component that starts a new baseline period for all its series
// (every beam, setup and method) from the post-service measurements.
func (s *server) componentService(c echo.Context) error {
	id, ok := paramID(c)
	if !ok {
		return s.fail(c, http.StatusNotFound, "There is no machine "+c.Param("id")+".")
	}
	cr, ok := s.d.Events.(ServiceEventCreator)
	if !ok {
		return s.fail(c, http.StatusServiceUnavailable, "Service events cannot be recorded on this server.")
	}
	kind, name, found := strings.Cut(c.FormValue("component"), "|")
	if !found {
		return s.fail(c, http.StatusUnprocessableEntity, "Choose the component the service touched.")
	}
	at := s.d.Now()
	if v := strings.TrimSpace(c.FormValue("at")); v != "" {
		t, err := time.ParseInLocation("2006-01-02T15:04", v, time.Local)
		if err != nil {
			return s.fail(c, http.StatusUnprocessableEntity, "The service time must be a date and time like 2026-11-30T14:00.")
		}
		at = t
	}
	ev := halfmark.ServiceEvent{MachineID: id, At: at, Note: c.FormValue("note"), NewBaseline: true,
		Component: &halfmark.Component{Kind: halfmark.ComponentKind(kind), Name: name}}
	if err := cr.CreateServiceEvent(c.Request().Context(), user(c).Actor(), &ev); err != nil {
		return s.failErr(c, err)
	}
	s.status.invalidate()
	return c.Redirect(http.StatusSeeOther, "/machines/"+strconv.FormatInt(id, 10))
}

// acknowledgeAll serves POST /machines/{id}/findings/acknowledge: every
// open finding of the machine, with one comment.
func (s *server) acknowledgeAll(c echo.Context) error {
	id, ok := paramID(c)
	if !ok {
		return s.fail(c, http.StatusNotFound, "There is no machine "+c.Param("id")+".")
	}
	b, ok := s.d.Findings.(bulkAcknowledger)
	if !ok {
		return s.fail(c, http.StatusServiceUnavailable, "Findings are not available on this server.")
	}
	if err := halfmark.ValidateComment("comment", c.FormValue("comment"), false); err != nil {
		return s.failErr(c, err)
	}
	if _, err := b.AcknowledgeMachineFindings(c.Request().Context(), user(c).Actor(), id, c.FormValue("comment")); err != nil {
		return s.failErr(c, err)
	}
	s.status.invalidate()
	return c.Redirect(http.StatusSeeOther, "/machines/"+strconv.FormatInt(id, 10))
}
