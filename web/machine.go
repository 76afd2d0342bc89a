package web

import (
	"fmt"
	"html/template"
	"math"
	"net/http"
	"sort"
	"strconv"
	"time"

	"github.com/labstack/echo/v4"
	"gonum.org/v1/plot/vg"

	"halfmark"
)

type machineData struct {
	M             halfmark.Machine
	Beams         []beamBlock
	Alerts        []halfmark.Alert
	AlertsMissing bool
	Events        []halfmark.ServiceEvent
	EventsMissing bool
	Checks        []checkRow
	Month         string
	// Findings are the machine's active findings (the drift engine's),
	// Components what a service can name.
	Findings   []halfmark.Finding
	Components []componentOption
	Now        string // "2006-01-02T15:04", for the service form
}

type beamBlock struct {
	Beam   halfmark.Beam
	Groups []geomBlock
}

type geomBlock struct {
	Geometry string
	Jaws     []chartBox
	Pairs    []pairRow
	Others   []seriesView
	Banks    []bankRow
}

type chartBox struct {
	V   seriesView
	SVG template.HTML
}

// pairRow is a field size and centre offset from a jaw pair's newest
// common check: size = E1 + E2, centre = (E2 − E1)/2 (IEC 61217 edge
// convention; see the halfmark package).
type pairRow struct {
	Axis             string
	SizeMM, CentreMM float64
	BaseSizeMM       *float64
	BaseCentreMM     *float64
	At               time.Time
}

// bankRow summarises an MLC bank's newest leaf positions against their
// baselines; its level is that of the bank's active finding (the drift
// engine judges the bank mean, never this page).
type bankRow struct {
	Bank         int
	Leaves       int
	MeanDevMM    float64
	MaxAbsDevMM  float64
	WorstEdge    string
	WorstSeries  int64
	Level        halfmark.Level
	FindingID    int64
	WithBaseline int
}

type checkRow struct {
	halfmark.Check
	Beam string
}

// maxEvents is how many service events the machine page lists.
const maxEvents = 20

var jawOrder = map[string]int{"X1": 0, "X2": 1, "Y1": 2, "Y2": 3}

func paramID(c echo.Context) (int64, bool) {
	id, err := strconv.ParseInt(c.Param("id"), 10, 64)
	return id, err == nil && id > 0
}

func (s *server) machine(c echo.Context) error {
	id, ok := paramID(c)
	if !ok {
		return s.fail(c, http.StatusNotFound, "There is no machine "+c.Param("id")+".")
	}
	ctx := c.Request().Context()
	m, err := s.d.Machines.Machine(ctx, id)
	if err != nil {
		return s.failErr(c, err)
	}
	beams, err := s.d.Machines.Beams(ctx, id)
	if err != nil {
		return s.failErr(c, err)
	}
	views, err := s.machineViews(ctx, id)
	if err != nil {
		return s.failErr(c, err)
	}
	now := s.d.Now()
	data := machineData{M: m, Month: now.Format("2006-01"), Components: machineComponents(views, beams), Now: now.Local().Format("2006-01-02T15:04")}
	if s.d.Findings != nil {
		if data.Findings, err = s.d.Findings.Findings(ctx, halfmark.FindingFilter{MachineID: id, State: "active"}); err != nil {
			return s.failErr(c, err)
		}
	}
	labels := map[int64]string{}
	for _, b := range beams {
		labels[b.ID] = b.Label
		bb := beamBlock{Beam: b}
		groups := map[string]*geomBlock{}
		var order []string
		for _, v := range views {
			if v.S.BeamID != b.ID {
				continue
			}
			g := groups[v.S.Geometry]
			if g == nil {
				g = &geomBlock{Geometry: v.S.Geometry}
				groups[v.S.Geometry] = g
				order = append(order, v.S.Geometry)
			}
			_, jaw := jawOrder[v.S.Edge]
			switch {
			case jaw && v.S.Quantity == halfmark.QPosition:
				svg, err := inlineSVG(valuePlot(withTitle(specFor(v, true, now), v.S.Edge+" position")), vg.Points(270), vg.Points(150), v.S.Edge+" position chart")
				if err != nil {
					return s.failErr(c, err)
				}
				g.Jaws = append(g.Jaws, chartBox{V: v, SVG: svg})
			case jaw:
				g.Others = append(g.Others, v)
			}
		}
		for _, geom := range order {
			g := groups[geom]
			sort.Slice(g.Jaws, func(i, j int) bool { return jawOrder[g.Jaws[i].V.S.Edge] < jawOrder[g.Jaws[j].V.S.Edge] })
			g.Pairs = pairs(g.Jaws)
			g.Banks = banks(views, b.ID, geom, data.Findings)
			bb.Groups = append(bb.Groups, *g)
		}
		data.Beams = append(data.Beams, bb)
	}
	if s.d.Alerts != nil {
		data.Alerts, err = s.d.Alerts.Alerts(ctx, halfmark.AlertFilter{MachineID: id, Limit: 100})
		if err != nil {
			return s.failErr(c, err)
		}
	} else {
		data.AlertsMissing = true
	}
	if s.d.Events != nil {
		data.Events, err = s.d.Events.ServiceEvents(ctx, id)
		if err != nil {
			return s.failErr(c, err)
		}
		if len(data.Events) > maxEvents {
			data.Events = data.Events[:maxEvents]
		}
	} else {
		data.EventsMissing = true
	}
	checks, err := s.d.Checks.Checks(ctx, halfmark.CheckFilter{MachineID: id, Limit: 30})
	if err != nil {
		return s.failErr(c, err)
	}
	for _, ch := range checks {
		data.Checks = append(data.Checks, checkRow{Check: ch, Beam: labels[ch.BeamID]})
	}
	return s.render(c, http.StatusOK, "machine", m.Name, data)
}

func withTitle(sp chartSpec, t string) chartSpec { sp.Title = t; return sp }

// pairs derives field size and centre offset for X and Y from the newest
// check that measured both edges of the pair.
func pairs(jaws []chartBox) []pairRow {
	by := map[string]seriesView{}
	for _, j := range jaws {
		by[j.V.S.Edge] = j.V
	}
	var out []pairRow
	for _, ax := range []string{"X", "Y"} {
		e1, ok1 := by[ax+"1"]
		e2, ok2 := by[ax+"2"]
		if !ok1 || !ok2 {
			continue
		}
		second := make(map[string]halfmark.Point, len(e2.Points))
		for _, p := range e2.Points {
			second[p.CheckID] = p
		}
		for i := len(e1.Points) - 1; i >= 0; i-- {
			p1 := e1.Points[i]
			p2, ok := second[p1.CheckID]
			if !ok {
				continue
			}
			r := pairRow{Axis: ax, SizeMM: p1.Value + p2.Value, CentreMM: (p2.Value - p1.Value) / 2, At: p1.MeasuredAt}
			if e1.HasCentre && e2.HasCentre {
				sz, ce := e1.Centre+e2.Centre, (e2.Centre-e1.Centre)/2
				r.BaseSizeMM, r.BaseCentreMM = &sz, &ce
			}
			out = append(out, r)
			break
		}
	}
	return out
}

// banks summarises MLC leaf-end position series of one beam and geometry
// by bank.
func banks(views []seriesView, beamID int64, geom string, findings []halfmark.Finding) []bankRow {
	var out []bankRow
	for bank := 1; bank <= 2; bank++ {
		r := bankRow{Bank: bank}
		var sum float64
		for _, v := range views {
			if v.S.BeamID != beamID || v.S.Geometry != geom || v.S.Quantity != halfmark.QPosition {
				continue
			}
			e, err := halfmark.ParseEdge(v.S.Edge)
			if err != nil || e.Jaw != "" || e.Bank != bank {
				continue
			}
			r.Leaves++
			if v.Deviation == nil {
				continue
			}
			r.WithBaseline++
			sum += *v.Deviation
			if a := math.Abs(*v.Deviation); a >= r.MaxAbsDevMM {
				r.MaxAbsDevMM, r.WorstEdge, r.WorstSeries = a, v.S.Edge, v.S.ID
			}
		}
		for _, f := range findings {
			if f.Kind == halfmark.ComponentMLCBank && f.Name == fmt.Sprintf("bank %d", bank) && f.Level > r.Level {
				r.Level, r.FindingID = f.Level, f.ID
			}
		}
		if r.Leaves == 0 {
			continue
		}
		if r.WithBaseline > 0 {
			r.MeanDevMM = sum / float64(r.WithBaseline)
		}
		out = append(out, r)
	}
	return out
}
