package web

import (
	"context"
	"html/template"
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
	Findings            []halfmark.Finding // active, most urgent first
}

func formatRow(m halfmark.MachineStatus, fs []halfmark.Finding) frontRow {
	r := frontRow{ID: m.ID, Name: m.Name, CSS: levelKey(m.Level, m.Overdue), Badge: glyph(m.Level, m.Overdue), Worst: m.Worst,
		Deviation: "—", Crossing: "—", LastCheck: "—", Findings: fs}
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

// frontState is what the front page shows: every machine's status and its
// active findings, both as the drift engine decided them.
type frontState struct {
	rows     []halfmark.MachineStatus
	findings map[int64][]halfmark.Finding
}

func (s *server) loadStatus(ctx context.Context) (frontState, error) {
	var st frontState
	if s.d.Status == nil {
		return st, halfmark.Errorf(halfmark.EUnavailable, "the front page needs the drift engine's status, which this server was started without")
	}
	rows, err := s.d.Status.Status(ctx)
	if err != nil {
		return st, err
	}
	sortStatus(rows)
	st.rows, st.findings = rows, map[int64][]halfmark.Finding{}
	if s.d.Findings != nil {
		fs, err := s.d.Findings.Findings(ctx, halfmark.FindingFilter{State: "active"})
		if err != nil {
			return st, err
		}
		for _, f := range fs {
			st.findings[f.MachineID] = append(st.findings[f.MachineID], f)
		}
	}
	return st, nil
}

// statusCacheTTL is how long one answer of the status service serves the
// front page. Every console reloads the page each minute; the status is
// recomputed at most this often, and at once after a check is saved here.
const statusCacheTTL = time.Second

// statusCache keeps the newest front-page rows; one caller loads while the
// others wait for it.
type statusCache struct {
	mu sync.Mutex
	v  *statusView
}

func (c *statusCache) get(ctx context.Context, now time.Time, load func(context.Context) (frontState, error)) (*statusView, error) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.v != nil && now.Sub(c.v.at) < statusCacheTTL && !now.Before(c.v.at) {
		return c.v, nil
	}
	st, err := load(ctx)
	if err != nil {
		return nil, err
	}
	v := &statusView{at: now, rows: make([]frontRow, len(st.rows))}
	for i, r := range st.rows {
		v.rows[i] = formatRow(r, st.findings[r.ID])
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
		if a.Findings != b.Findings {
			return b.Findings - a.Findings
		}
		return strings.Compare(a.Name, b.Name)
	})
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
		if len(r.Findings) == 0 {
			w(`<span class="muted">no active finding</span>`)
		}
		for i, f := range r.Findings {
			if i > 0 {
				w(`<br>`)
			}
			w(string(glyph(f.Level, false)))
			w(` <a href="/findings/`)
			b.Write(strconv.AppendInt(num[:0], f.ID, 10))
			w(`">`)
			esc(f.Component.Label())
			w(`</a> <span class="num">`)
			esc(signed(f.MagnitudeMM))
			w(` mm</span> <small class="muted">`)
			esc(crossingText(f.Crossing))
			if f.State == halfmark.FindingAcknowledged {
				w(` · acknowledged by `)
				esc(f.AckBy)
			}
			w(`</small>`)
		}
		w(`</td><td class="num">`)
		esc(r.Deviation)
		w(`</td><td>`)
		esc(r.Crossing)
		w(`</td><td>`)
		esc(r.LastCheck)
		w("</td></tr>\n")
	}
	return template.HTML(b.String())
}

// crossingText says when a finding's trend reaches its tolerance, with a
// date only when the engine projected one.
func crossingText(c halfmark.FindingCrossing) string {
	switch c.Status {
	case halfmark.CrossingAlreadyBeyond:
		return "beyond tolerance now"
	case halfmark.CrossingProjected:
		if c.ToleranceDate != nil {
			return "tolerance reached about " + c.ToleranceDate.Local().Format("2006-01-02")
		}
	case halfmark.CrossingBeyondHorizon:
		return "trend reaches tolerance beyond the horizon"
	}
	return "no significant trend"
}
