package web

import (
	"net/http"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
	"halfmark/analysis/penumbra"
)

// beamData is the beam page: the fitted penumbra model, its residuals by
// collimator and setup, a prediction form and, when a service event
// followed the baseline period's start, the cause of the change since it.
type beamData struct {
	M        halfmark.Machine
	Beam     halfmark.Beam
	Model    *penumbra.Model
	ModelErr string
	Period   string
	SCD      map[string]float64
	// The prediction form: the values asked, the answer or what to fix.
	Ask        bool
	SSD, Depth string
	Collimator string
	Predicted  *penumbra.Prediction
	PredictErr string
	// Change since the newest service event after the period start.
	Event        *halfmark.ServiceEvent
	Cause        *halfmark.PenumbraCause
	CauseText    string
	ExplainedPct float64
}

// beam serves GET /machines/:id/beams/:beam.
func (s *server) beam(c echo.Context) error {
	mid, ok := paramID(c)
	bid, err := strconv.ParseInt(c.Param("beam"), 10, 64)
	if !ok || err != nil || bid <= 0 {
		return s.fail(c, http.StatusNotFound, "There is no such beam.")
	}
	ctx := c.Request().Context()
	m, err := s.d.Machines.Machine(ctx, mid)
	if err != nil {
		return s.failErr(c, err)
	}
	beams, err := s.d.Machines.Beams(ctx, mid)
	if err != nil {
		return s.failErr(c, err)
	}
	d := beamData{M: m, SSD: "120", Depth: "5", Collimator: "upper"}
	for _, b := range beams {
		if b.ID == bid {
			d.Beam = b
		}
	}
	if d.Beam.ID == 0 {
		return s.fail(c, http.StatusNotFound, "Machine "+m.Name+" has no beam "+c.Param("beam")+".")
	}
	title := m.Name + " · " + d.Beam.Label + " · penumbra model"
	if s.d.Penumbra == nil {
		d.ModelErr = "The penumbra model is not available on this server."
		return s.render(c, http.StatusOK, "beam", title, d)
	}
	model, set, err := penumbra.LoadModel(ctx, s.d.Penumbra, bid, halfmark.Method(c.QueryParam("method")), time.Time{})
	switch code := halfmark.ErrorCodeOf(err); {
	case err == nil:
	case code == halfmark.EConflict || code == halfmark.EInvalid:
		d.ModelErr = messageOf(err)
	default:
		return s.failErr(c, err)
	}
	if err == nil {
		d.Model = &model
		d.Period = "from the first point"
		if !set.PeriodStart.IsZero() {
			d.Period = "from " + set.PeriodStart.Local().Format("2006-01-02")
		}
		if err := s.causeSinceService(c, &d, set); err != nil {
			return s.failErr(c, err)
		}
	}
	if q := c.QueryParams(); q.Has("ssd_cm") || q.Has("depth_cm") || q.Has("collimator") {
		d.Ask = true
		d.SSD, d.Depth, d.Collimator = strings.TrimSpace(q.Get("ssd_cm")), strings.TrimSpace(q.Get("depth_cm")), strings.TrimSpace(q.Get("collimator"))
		if d.Model != nil {
			ssd, e1 := strconv.ParseFloat(d.SSD, 64)
			depth, e2 := strconv.ParseFloat(d.Depth, 64)
			switch {
			case e1 != nil:
				d.PredictErr = "SSD must be a number of cm, e.g. 120."
			case e2 != nil:
				d.PredictErr = "Depth must be a number of cm, e.g. 5 (0 at the surface)."
			default:
				p, err := d.Model.Predict(ssd, depth, penumbra.Collimator(d.Collimator))
				if err != nil {
					d.PredictErr = err.Error()
				} else {
					d.Predicted = &p
				}
			}
		}
	}
	return s.render(c, http.StatusOK, "beam", title, d)
}

// causeSinceService classifies the penumbra change since the newest
// service event after the period start, against a model fitted on the
// points before it (the page's own model is fitted on the whole period).
func (s *server) causeSinceService(c echo.Context, d *beamData, set halfmark.PenumbraSet) error {
	if s.d.Events == nil {
		return nil
	}
	ctx := c.Request().Context()
	evs, err := s.d.Events.ServiceEvents(ctx, d.M.ID)
	if err != nil {
		return err
	}
	for i := range evs { // newest first
		if evs[i].At.After(set.PeriodStart) && len(set.Points) > 0 && evs[i].At.After(set.Points[0].At) {
			d.Event = &evs[i]
			break
		}
	}
	if d.Event == nil {
		return nil
	}
	before, _, err := penumbra.LoadModel(ctx, s.d.Penumbra, d.Beam.ID, halfmark.Method(d.Model.Method), d.Event.At)
	if err != nil {
		if code := halfmark.ErrorCodeOf(err); code == halfmark.EConflict || code == halfmark.EInvalid {
			d.CauseText = "The points before the service cannot be fitted: " + messageOf(err)
			return nil
		}
		return err
	}
	var after []halfmark.PenumbraPoint
	for _, p := range set.Points {
		if !p.At.Before(d.Event.At) {
			after = append(after, p)
		}
	}
	pts, _, err := penumbra.FromSet(halfmark.PenumbraSet{Machine: d.M, Beam: d.Beam, Points: after})
	if err != nil {
		d.CauseText = err.Error()
		return nil
	}
	cause, msg, err := penumbra.Classify(before, pts)
	if err != nil {
		d.CauseText = err.Error()
		return nil
	}
	d.Cause, d.CauseText, d.ExplainedPct = &cause, msg, 100*cause.ExplainedFraction
	return nil
}
