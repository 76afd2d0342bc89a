package web

import (
	"html/template"
	"net/http"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"
	"gonum.org/v1/plot/vg"

	"halfmark"
)

type seriesData struct {
	V             seriesView
	Machine       halfmark.Machine
	Beam          string
	Chart         template.HTML
	EWMAChart     template.HTML
	Baselines     []halfmark.Baseline
	Rows          []provRow
	Alerts        []halfmark.Alert
	AlertsMissing bool
	FormError     string
	FormName      string
	Today         string
	Back          string
}

// provRow is one point with where it came from.
type provRow struct {
	halfmark.Point
	Deviation *float64
	Signal    bool
	Raw       []halfmark.RawData
}

// provenanceRows is how many of the newest points list their provenance.
const provenanceRows = 60

func (s *server) series(c echo.Context) error {
	return s.seriesPage(c, http.StatusOK, "", "")
}

func (s *server) seriesPage(c echo.Context, status int, form, formErr string) error {
	id, ok := paramID(c)
	if !ok {
		return s.fail(c, http.StatusNotFound, "There is no series "+c.Param("id")+".")
	}
	ctx := c.Request().Context()
	ser, err := s.d.Series.Series(ctx, id)
	if err != nil {
		return s.failErr(c, err)
	}
	pts, err := s.d.Series.Points(ctx, id)
	if err != nil {
		return s.failErr(c, err)
	}
	m, err := s.d.Machines.Machine(ctx, ser.MachineID)
	if err != nil {
		return s.failErr(c, err)
	}
	beams, err := s.d.Machines.Beams(ctx, ser.MachineID)
	if err != nil {
		return s.failErr(c, err)
	}
	now := s.d.Now()
	ev, err := s.seriesEvaluation(ctx, id)
	if err != nil {
		return s.failErr(c, err)
	}
	v := viewSeries(ser, pts, ev)
	d := seriesData{V: v, Machine: m, FormError: formErr, FormName: form, Today: now.Local().Format("2006-01-02"),
		Back: c.Request().URL.Path}
	for _, b := range beams {
		if b.ID == ser.BeamID {
			d.Beam = b.Label
		}
	}
	title := d.Beam + " " + ser.Edge + " " + string(ser.Quantity) + " · " + ser.Geometry
	if ev != nil {
		// The engine's stored chart, with the value and EWMA panels on one
		// time axis and corrected points drawn beside their corrections.
		corrected, err := s.correctedPoints(ctx, ser)
		if err != nil {
			return s.failErr(c, err)
		}
		if d.Chart, err = seriesChartSVG(ev.Chart, title, corrected, ev.Trend, v.Crossing); err != nil {
			return s.failErr(c, err)
		}
	} else if d.Chart, err = inlineSVG(valuePlot(withTitle(specFor(v, false, now), title)), vg.Points(720), vg.Points(300), title); err != nil {
		return s.failErr(c, err)
	}
	if d.Baselines, err = s.d.Series.Baselines(ctx, id); err != nil {
		return s.failErr(c, err)
	}
	for i := len(pts) - 1; i >= 0 && len(d.Rows) < provenanceRows; i-- {
		r := provRow{Point: pts[i], Signal: v.Signal[i]}
		if v.HasCentre && i >= v.Start {
			dv := pts[i].Value - v.Centre
			r.Deviation = &dv
		}
		if r.Raw, err = s.d.Raw.RawForCheck(ctx, pts[i].CheckID); err != nil {
			return s.failErr(c, err)
		}
		d.Rows = append(d.Rows, r)
	}
	if s.d.Alerts != nil {
		if d.Alerts, err = s.d.Alerts.Alerts(ctx, halfmark.AlertFilter{SeriesID: id, Limit: 50}); err != nil {
			return s.failErr(c, err)
		}
	} else {
		d.AlertsMissing = true
	}
	return s.render(c, status, "series", title, d)
}

func timesOf(pts []halfmark.Point) []time.Time {
	t := make([]time.Time, len(pts))
	for i, p := range pts {
		t[i] = p.MeasuredAt
	}
	return t
}

// parseDay reads a yyyy-mm-dd date (the value of an <input type=date>) as
// local midnight.
func parseDay(s string) (time.Time, bool) {
	t, err := time.ParseInLocation("2006-01-02", strings.TrimSpace(s), time.Local)
	return t, err == nil
}

// parseMM reads a number typed by a person: a decimal comma is accepted.
func parseMM(s string) (float64, bool) {
	v, err := strconv.ParseFloat(strings.ReplaceAll(strings.TrimSpace(s), ",", "."), 64)
	return v, err == nil
}

func (s *server) setBaseline(c echo.Context) error {
	id, ok := paramID(c)
	if !ok {
		return s.fail(c, http.StatusNotFound, "There is no series "+c.Param("id")+".")
	}
	var msgs []string
	b := halfmark.Baseline{SeriesID: id, Source: halfmark.BaselineSet, Reason: strings.TrimSpace(c.FormValue("reason"))}
	if v, ok := parseMM(c.FormValue("value_mm")); ok {
		b.ValueMM = &v
	} else {
		msgs = append(msgs, "Baseline value: type a number in mm, e.g. 50.0.")
	}
	if raw := strings.TrimSpace(c.FormValue("sigma_mm")); raw != "" {
		if v, ok := parseMM(raw); ok {
			b.SigmaMM = &v
		} else {
			msgs = append(msgs, "σ: type a number in mm, e.g. 0.15, or leave it empty to estimate it from the points.")
		}
	}
	if t, ok := parseDay(c.FormValue("valid_from")); ok {
		b.ValidFrom = t
	} else {
		msgs = append(msgs, "Valid from: pick a date.")
	}
	if b.Reason == "" {
		msgs = append(msgs, "Reason: say why the baseline is set, e.g. \"commissioning value\".")
	}
	return s.storeBaseline(c, "baseline", &b, msgs)
}

// newPeriod starts a new baseline period after a service: the baseline is
// estimated again from the first points after the date.
func (s *server) newPeriod(c echo.Context) error {
	id, ok := paramID(c)
	if !ok {
		return s.fail(c, http.StatusNotFound, "There is no series "+c.Param("id")+".")
	}
	var msgs []string
	b := halfmark.Baseline{SeriesID: id, Source: halfmark.BaselineService, Reason: strings.TrimSpace(c.FormValue("reason"))}
	if t, ok := parseDay(c.FormValue("valid_from")); ok {
		b.ValidFrom = t
	} else {
		msgs = append(msgs, "Service date: pick the date of the service.")
	}
	if b.Reason == "" {
		msgs = append(msgs, "Reason: describe the service, e.g. \"X2 jaw motor replaced\".")
	}
	return s.storeBaseline(c, "period", &b, msgs)
}

// storeBaseline stores a baseline version from one of the series page's
// forms: with the form's messages beside it when anything is wrong,
// nothing stored; else back to the series page.
func (s *server) storeBaseline(c echo.Context, form string, b *halfmark.Baseline, msgs []string) error {
	if len(msgs) > 0 {
		return s.seriesPage(c, http.StatusUnprocessableEntity, form, strings.Join(msgs, " "))
	}
	b.SetBy = user(c).Email
	if err := s.d.Series.SetBaseline(c.Request().Context(), user(c).Actor(), b); err != nil {
		if halfmark.ErrorCodeOf(err) == halfmark.EInvalid {
			return s.seriesPage(c, http.StatusUnprocessableEntity, form, err.Error())
		}
		return s.failErr(c, err)
	}
	return c.Redirect(http.StatusSeeOther, "/series/"+c.Param("id"))
}

func (s *server) acknowledge(c echo.Context) error { return s.alertAction(c, false) }
func (s *server) resolve(c echo.Context) error     { return s.alertAction(c, true) }

func (s *server) alertAction(c echo.Context, resolve bool) error {
	if s.d.Alerts == nil {
		return s.fail(c, http.StatusServiceUnavailable, "Alerts are not available on this server yet.")
	}
	id, ok := paramID(c)
	if !ok {
		return s.fail(c, http.StatusNotFound, "There is no alert "+c.Param("id")+".")
	}
	comment := strings.TrimSpace(c.FormValue("comment"))
	if err := halfmark.ValidateComment("comment", comment, false); err != nil {
		return s.failErr(c, err)
	}
	if resolve && comment == "" {
		return s.fail(c, http.StatusUnprocessableEntity, "Resolving an alert needs a comment that says what was found and done. Go back and add one.")
	}
	var err error
	if resolve {
		_, err = s.d.Alerts.Resolve(c.Request().Context(), user(c).Actor(), id, comment)
	} else {
		_, err = s.d.Alerts.Acknowledge(c.Request().Context(), user(c).Actor(), id, comment)
	}
	if err != nil {
		return s.failErr(c, err)
	}
	s.status.invalidate()
	return c.Redirect(http.StatusSeeOther, localPath(c.FormValue("back")))
}

func (s *server) rawDownload(c echo.Context) error {
	id, ok := paramID(c)
	if !ok {
		return s.fail(c, http.StatusNotFound, "There is no raw file "+c.Param("id")+".")
	}
	r, err := s.d.Raw.Raw(c.Request().Context(), id)
	if err != nil {
		return s.failErr(c, err)
	}
	name := strings.Map(func(r rune) rune {
		if r < 0x20 || r == '"' || r == '\\' || r > 0x7e {
			return '_'
		}
		return r
	}, r.Filename)
	c.Response().Header().Set("Content-Disposition", `attachment; filename="`+name+`"`)
	return c.Blob(http.StatusOK, "application/octet-stream", r.Content)
}
