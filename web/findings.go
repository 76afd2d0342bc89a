package web

import (
	"fmt"
	"net/http"
	"strconv"
	"strings"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// findingRow is one finding as the pages show it.
type findingRow struct {
	F         halfmark.Finding
	Component string
	Magnitude string // "+0.92 mm (95% +0.80 to +1.04 mm)"
	Crossing  string
	Message   string
	Handling  string
}

func rowOf(f halfmark.Finding) findingRow {
	return findingRow{F: f, Component: kindName(f.Kind) + " " + f.Name,
		Magnitude: fmt.Sprintf("%s mm (95%% interval %s to %s mm)", signed(f.MagnitudeMM), signed(f.MagnitudeCIMM[0]), signed(f.MagnitudeCIMM[1])),
		Crossing:  reportCrossingText(f.Crossing), Message: plainNumbers(f.Message), Handling: handlingText(f)}
}

type findingsData struct {
	Rows      []findingRow
	State     string
	States    []string
	MachineID int64
	Machines  []halfmark.Machine
	// Unavailable: this server has no finding store yet.
	Unavailable bool
}

// findings lists findings: active ones by default, of one machine with
// ?machine=N, in another state with ?state=.
func (s *server) findings(c echo.Context) error {
	state, err := halfmark.ParseFindingState(c.QueryParam("state"))
	if err != nil {
		return s.fail(c, http.StatusBadRequest, "The state filter is not valid: "+err.Error()+".")
	}
	d := findingsData{State: state, States: []string{"active", "open", "acknowledged", "resolved", "all"}}
	if q := c.QueryParam("machine"); q != "" {
		if d.MachineID, err = strconv.ParseInt(q, 10, 64); err != nil || d.MachineID <= 0 {
			return s.fail(c, http.StatusBadRequest, fmt.Sprintf("The machine %q is not a machine id; use ?machine=1.", q))
		}
	}
	ctx := c.Request().Context()
	if d.Machines, err = s.d.Machines.Machines(ctx); err != nil {
		return s.failErr(c, err)
	}
	if s.d.Findings == nil {
		d.Unavailable = true
		return s.render(c, http.StatusOK, "findings", "Findings", d)
	}
	fs, err := s.d.Findings.Findings(ctx, halfmark.FindingFilter{MachineID: d.MachineID, State: state, Limit: 1000})
	if err != nil {
		return s.failErr(c, err)
	}
	for _, f := range fs {
		d.Rows = append(d.Rows, rowOf(f))
	}
	return s.render(c, http.StatusOK, "findings", "Findings", d)
}

type findingData struct {
	findingRow
	Problem string
	Comment string
}

func (s *server) findingID(c echo.Context) (int64, error) {
	id, err := strconv.ParseInt(c.Param("id"), 10, 64)
	if err != nil || id <= 0 {
		return 0, halfmark.Errorf(halfmark.ENotFound, "There is no finding %s.", c.Param("id"))
	}
	if s.d.Findings == nil {
		return 0, halfmark.Errorf(halfmark.ENotFound, "There is no finding %d: this server keeps no findings yet.", id)
	}
	return id, nil
}

// finding shows one finding: what it is, its evidence with links to the
// series pages, its lifecycle and, for physicists, the forms that move it.
func (s *server) finding(c echo.Context) error {
	id, err := s.findingID(c)
	if err != nil {
		return s.failErr(c, err)
	}
	f, err := s.d.Findings.Finding(c.Request().Context(), id)
	if err != nil {
		return s.failErr(c, err)
	}
	return s.render(c, http.StatusOK, "finding", "Finding "+strconv.FormatInt(id, 10), findingData{findingRow: rowOf(f)})
}

func (s *server) findingAcknowledge(c echo.Context) error { return s.moveFinding(c, false) }
func (s *server) findingResolve(c echo.Context) error     { return s.moveFinding(c, true) }

// moveFinding acknowledges or resolves a finding. A refusal (a resolve
// without a comment, a finding no longer open) shows on the finding's page
// with the comment kept.
func (s *server) moveFinding(c echo.Context, resolve bool) error {
	id, err := s.findingID(c)
	if err != nil {
		return s.failErr(c, err)
	}
	ctx := c.Request().Context()
	comment := strings.TrimSpace(c.FormValue("comment"))
	var problem string
	if resolve && comment == "" {
		problem = "Say why the finding is resolved (comment): it is kept in the record."
	} else {
		if resolve {
			_, err = s.d.Findings.ResolveFinding(ctx, user(c).Actor(), id, comment)
		} else {
			_, err = s.d.Findings.AcknowledgeFinding(ctx, user(c).Actor(), id, comment)
		}
		switch halfmark.ErrorCodeOf(err) {
		case "":
			return c.Redirect(http.StatusSeeOther, fmt.Sprintf("/findings/%d", id))
		case halfmark.EInvalid, halfmark.EConflict:
			problem = messageOf(err)
			if he, ok := err.(*halfmark.Error); ok && len(he.Fields) > 0 {
				problem = err.Error()
			}
		default:
			return s.failErr(c, err)
		}
	}
	f, err := s.d.Findings.Finding(ctx, id)
	if err != nil {
		return s.failErr(c, err)
	}
	return s.render(c, http.StatusUnprocessableEntity, "finding", "Finding "+strconv.FormatInt(id, 10),
		findingData{findingRow: rowOf(f), Problem: problem, Comment: comment})
}

// alertsPage sends links of older notifications (/alerts) to the findings.
func (s *server) alertsPage(c echo.Context) error {
	return c.Redirect(http.StatusSeeOther, "/findings")
}

// alertPage sends a link to one alert (/alerts/{id}, in notifications sent
// before findings) to the page that shows it: its series, else its machine.
func (s *server) alertPage(c echo.Context) error {
	id, err := strconv.ParseInt(c.Param("id"), 10, 64)
	if err != nil || id <= 0 || s.d.Alerts == nil {
		return s.fail(c, http.StatusNotFound, "There is no alert "+c.Param("id")+".")
	}
	a, err := s.d.Alerts.Alert(c.Request().Context(), id)
	if err != nil {
		return s.failErr(c, err)
	}
	if a.SeriesID != nil {
		return c.Redirect(http.StatusSeeOther, fmt.Sprintf("/series/%d", *a.SeriesID))
	}
	return c.Redirect(http.StatusSeeOther, fmt.Sprintf("/machines/%d", a.MachineID))
}
