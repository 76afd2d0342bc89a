package web

import (
	"context"
	"html/template"
	"math"
	"net/http"
	"slices"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// frontRefreshSeconds is the front page's automatic refresh period.
const frontRefreshSeconds = 60

type frontData struct {
	At      string
	Rows    []frontRow
	Body    template.HTML // the table rows, written by tableRows
	Problem string
}

// frontRow is one machine, formatted in Go so that the template does
// little work (the front page is the most requested page).
type frontRow struct {
	ID                  int64
	Name                string
	CSS                 string
	Badge               template.HTML
	Worst               *halfmark.WorstSeries
	Deviation, Crossing string
	LastCheck           string
	OpenAlerts          int
}

func formatRow(m halfmark.MachineStatus) frontRow {
	r := frontRow{ID: m.ID, Name: m.Name, CSS: levelKey(m.Level, m.Overdue), Badge: glyph(m.Level, m.Overdue), Worst: m.Worst,
		Deviation: "—", Crossing: "—", LastCheck: "—", OpenAlerts: m.OpenAlerts}
	if w := m.Worst; w != nil {
		if w.DeviationMM != nil {
			r.Deviation = signed(*w.DeviationMM)
			if w.ToleranceMM != nil {
				r.Deviation += " / ±" + mm(*w.ToleranceMM)
			}
		}
		if w.ProjectedCrossing != nil {
			r.Crossing = w.ProjectedCrossing.Local().Format("2006-01-02")
		}
	}
	if m.LastCheckAt != nil {
		r.LastCheck = when(*m.LastCheckAt)
	}
	return r
}

// front lists the machines that need attention first.
func (s *server) front(c echo.Context) error {
	v, err := s.status.get(c.Request().Context(), time.Now(), s.loadStatus)
	if err != nil {
		return s.failErr(c, err)
	}
	p := s.page(c, "Machines", frontData{At: v.at.Local().Format("15:04:05"), Rows: v.rows, Body: v.body})
	p.Refresh = frontRefreshSeconds
	return s.renderPage(c, http.StatusOK, "front", p)
}

// statusView is one answer of the status service, formatted for the page.
type statusView struct {
	at   time.Time
	rows []frontRow
	body template.HTML
}

func (s *server) loadStatus(ctx context.Context) ([]halfmark.MachineStatus, error) {
	var rows []halfmark.MachineStatus
	var err error
	if s.d.Status != nil {
		rows, err = s.d.Status.Status(ctx)
	} else {
		rows, err = s.computedStatus(ctx)
	}
	if err != nil {
		return nil, err
	}
	sortStatus(rows)
	return rows, nil
}

// statusCacheTTL is how long one answer of the status service serves the
// front page. Every console reloads the page each minute; the status is
// recomputed at most this often, and at once after a check is saved here.
const statusCacheTTL = 5 * time.Second

// statusCache keeps the newest front-page rows; one caller loads while the
// others wait for it.
type statusCache struct {
	mu sync.Mutex
	v  *statusView
}

func (c *statusCache) get(ctx context.Context, now time.Time, load func(context.Context) ([]halfmark.MachineStatus, error)) (*statusView, error) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.v != nil && now.Sub(c.v.at) < statusCacheTTL && !now.Before(c.v.at) {
		return c.v, nil
	}
	rows, err := load(ctx)
	if err != nil {
		return nil, err
	}
	v := &statusView{at: now, rows: make([]frontRow, len(rows))}
	for i, r := range rows {
		v.rows[i] = formatRow(r)
	}
	v.body = tableRows(v.rows)
	c.v = v
	return v, nil
}

// invalidate makes the next front page ask the status service again.
func (c *statusCache) invalidate() {
	c.mu.Lock()
	c.v = nil
	c.mu.Unlock()
}

// statusRank orders the front page: Level 3, 2, 1, then overdue, then in
// control.
func statusRank(m halfmark.MachineStatus) int {
	if m.Level > halfmark.LevelInControl {
		return 10 + int(m.Level)
	}
	if m.Overdue {
		return 5
	}
	return 0
}

func sortStatus(rows []halfmark.MachineStatus) {
	slices.SortStableFunc(rows, func(a, b halfmark.MachineStatus) int {
		if ra, rb := statusRank(a), statusRank(b); ra != rb {
			return rb - ra
		}
		if a.OpenAlerts != b.OpenAlerts {
			return b.OpenAlerts - a.OpenAlerts
		}
		return strings.Compare(a.Name, b.Name)
	})
}

// overdueAfter is the fallback overdue rule used when no StatusService is
// wired: no check of any kind for this long (common practice: a daily check
// each treatment day).
const overdueAfter = 24 * time.Hour

// computedStatus builds the front page from the series themselves when the
// drift engine's StatusService is not wired: each machine's worst series by
// level, then by |deviation| / tolerance.
func (s *server) computedStatus(ctx context.Context) ([]halfmark.MachineStatus, error) {
	ms, err := s.d.Machines.Machines(ctx)
	if err != nil {
		return nil, err
	}
	beams := map[int64]string{}
	now := s.d.Now()
	out := make([]halfmark.MachineStatus, 0, len(ms))
	for _, m := range ms {
		bs, err := s.d.Machines.Beams(ctx, m.ID)
		if err != nil {
			return nil, err
		}
		for _, b := range bs {
			beams[b.ID] = b.Label
		}
		views, err := s.machineViews(ctx, m.ID)
		if err != nil {
			return nil, err
		}
		st := halfmark.MachineStatus{ID: m.ID, Name: m.Name}
		var worst *seriesView
		worstScore := -1.0
		for i := range views {
			v := &views[i]
			if v.S.LastAt != nil && (st.LastCheckAt == nil || v.S.LastAt.After(*st.LastCheckAt)) {
				t := *v.S.LastAt
				st.LastCheckAt = &t
			}
			if v.Deviation == nil {
				continue
			}
			score := float64(v.Level) * 1000
			if v.HasLimits && v.Limits.ToleranceMM > 0 {
				score += math.Abs(*v.Deviation) / v.Limits.ToleranceMM
			}
			if score > worstScore {
				worst, worstScore = v, score
			}
		}
		if worst != nil {
			st.Level = worst.Level
			w := &halfmark.WorstSeries{SeriesID: worst.S.ID, BeamID: worst.S.BeamID, BeamLabel: beams[worst.S.BeamID],
				Edge: worst.S.Edge, Quantity: worst.S.Quantity, Geometry: worst.S.Geometry, Rule: worst.Rule,
				DeviationMM: worst.Deviation, ProjectedCrossing: worst.Crossing}
			if worst.HasLimits {
				t, a := worst.Limits.ToleranceMM, worst.Limits.ActionMM
				w.ToleranceMM, w.ActionMM = &t, &a
			}
			st.Worst = w
		}
		st.Overdue = st.LastCheckAt == nil || now.Sub(*st.LastCheckAt) > overdueAfter
		if s.d.Alerts != nil {
			as, err := s.d.Alerts.Alerts(ctx, halfmark.AlertFilter{MachineID: m.ID})
			if err != nil {
				return nil, err
			}
			st.OpenAlerts = len(as)
		}
		out = append(out, st)
	}
	return out, nil
}

// tableRows writes the front page's rows directly: the page is requested
// by every console every minute, and html/template's per-action escaping
// costs several times the rest of the request. Every text is escaped with
// template.HTMLEscapeString; ids are integers.
func tableRows(rows []frontRow) template.HTML {
	var b strings.Builder
	b.Grow(len(rows) * 700)
	w := b.WriteString
	esc := func(s string) {
		if strings.ContainsAny(s, `<>&'"`) {
			s = template.HTMLEscapeString(s)
		}
		w(s)
	}
	var num [20]byte
	for _, r := range rows {
		w(`<tr class="row-`)
		w(r.CSS)
		w(`"><td>`)
		w(string(r.Badge))
		w(`</td><td><a href="/machines/`)
		b.Write(strconv.AppendInt(num[:0], r.ID, 10))
		w(`"><strong>`)
		esc(r.Name)
		w(`</strong></a></td><td>`)
		if s := r.Worst; s != nil {
			w(`<a href="/series/`)
			b.Write(strconv.AppendInt(num[:0], s.SeriesID, 10))
			w(`">`)
			esc(s.BeamLabel)
			w(` · `)
			esc(s.Edge)
			w(` · `)
			esc(string(s.Quantity))
			w(`</a><br><small class="muted">`)
			esc(s.Geometry)
			if s.Rule != "" {
				w(` · `)
				esc(s.Rule)
			}
			w(`</small>`)
		} else {
			w(`<span class="muted">—</span>`)
		}
		w(`</td><td class="num">`)
		esc(r.Deviation)
		w(`</td><td>`)
		esc(r.Crossing)
		w(`</td><td>`)
		esc(r.LastCheck)
		w(`</td><td class="num">`)
		b.Write(strconv.AppendInt(num[:0], int64(r.OpenAlerts), 10))
		w("</td></tr>\n")
	}
	return template.HTML(b.String())
}
