package web

import (
	"bytes"
	"fmt"
	"math"
	"net/http"
	"strconv"
	"strings"

	"codeberg.org/go-pdf/fpdf"
	"github.com/labstack/echo/v4"
	"gonum.org/v1/plot/vg"

	"halfmark"
)

// reportMaxCharts bounds the charts in one report (a machine with many
// geometries would otherwise make a very long document).
const reportMaxCharts = 48

// safetyCaution is printed on every page and in every report.
const safetyCaution = "Halfmark's results support, and never replace, the judgement of a qualified medical physicist. " +
	"Tolerances and action limits are set locally and are the local physicist's responsibility. " +
	"Follow your local regulations and licensed practice."

// report renders the monthly PDF report of a machine.
func (s *server) report(c echo.Context) error {
	id, ok := paramID(c)
	if !ok {
		return s.fail(c, http.StatusNotFound, "There is no machine "+c.Param("id")+".")
	}
	month := c.QueryParam("month")
	from, to, ok := monthBounds(month)
	if !ok {
		return s.fail(c, http.StatusBadRequest, fmt.Sprintf("The month %q is not like 2026-03; add ?month=YYYY-MM to the address.", month))
	}
	ctx := c.Request().Context()
	m, err := s.d.Machines.Machine(ctx, id)
	if err != nil {
		return s.failErr(c, err)
	}
	md, err := s.monthlyData(ctx, c, strconv.FormatInt(id, 10), month)
	if err != nil {
		return s.failErr(c, err)
	}
	labels := map[int64]string{}
	for _, b := range md.Beams {
		labels[b.ID] = b.Label
	}
	checks, err := s.d.Checks.Checks(ctx, halfmark.CheckFilter{MachineID: id, From: from, To: to, Limit: 5000})
	if err != nil {
		return s.failErr(c, err)
	}
	views, err := s.machineViews(ctx, id)
	if err != nil {
		return s.failErr(c, err)
	}
	var alerts []halfmark.Alert
	if s.d.Alerts != nil {
		all, err := s.d.Alerts.Alerts(ctx, halfmark.AlertFilter{MachineID: id, Limit: 1000,
			States: []halfmark.AlertState{halfmark.AlertOpen, halfmark.AlertAcknowledged, halfmark.AlertResolved}})
		if err != nil {
			return s.failErr(c, err)
		}
		for _, a := range all {
			if a.OpenedAt.Before(to) && (a.ResolvedAt == nil || !a.ResolvedAt.Before(from)) {
				alerts = append(alerts, a)
			}
		}
	}
	signs, err := s.d.Audit.Audit(ctx, "report", halfmark.ReportEntityID(id, month), 20)
	if err != nil {
		return s.failErr(c, err)
	}

	pdf := fpdf.New("P", "mm", "A4", "")
	cp := pdf.UnicodeTranslatorFromDescriptor("")
	// The core fonts use code page 1252, which lacks the minus sign and σ.
	ascii := strings.NewReplacer("−", "-", "σ", " sigma", "≤", "<=", "≥", ">=")
	tr := func(s string) string { return cp(ascii.Replace(s)) }
	title := "Halfmark monthly report: " + m.Name + " " + month
	pdf.SetTitle(title, !isASCII(title))
	pdf.SetAuthor("Halfmark", false)
	pdf.SetCreator("Halfmark", false)
	pdf.SetSubject("Beam edge QA, "+month, false)
	pdf.SetCreationDate(s.d.Now())
	pdf.SetAutoPageBreak(true, 18)
	pdf.SetFooterFunc(func() {
		pdf.SetY(-14)
		pdf.SetFont("Helvetica", "", 7)
		pdf.SetTextColor(90, 100, 110)
		pdf.MultiCell(0, 3, tr(safetyCaution+fmt.Sprintf("   Page %d", pdf.PageNo())), "", "L", false)
		pdf.SetTextColor(0, 0, 0)
	})
	pdf.AddPage()
	pdf.SetFont("Helvetica", "B", 16)
	pdf.CellFormat(0, 9, tr("Monthly QA report — "+m.Name), "", 1, "L", false, 0, "")
	pdf.SetFont("Helvetica", "", 10)
	pdf.CellFormat(0, 6, tr(fmt.Sprintf("Month %s · %s %s · SAD %g cm · produced %s", month, m.Model, m.Serial, m.SADcm,
		s.d.Now().Local().Format("2006-01-02 15:04"))), "", 1, "L", false, 0, "")
	pdf.Ln(2)
	pdf.SetFont("Helvetica", "B", 10)
	pdf.MultiCell(0, 5, tr("Safety caution. "+safetyCaution), "1", "L", false)
	pdf.SetFont("Helvetica", "", 9)
	tol := "Tolerances: " + s.d.Tolerances.Source() + " (SHA-256 " + short(s.d.Tolerances.Hash()) + ")."
	if s.d.Tolerances.IsShippedExample() {
		tol += " The SHIPPED EXAMPLE tolerances are in force: the local physicist must set and approve them."
	}
	pdf.MultiCell(0, 5, tr(tol), "", "L", false)

	heading := func(t string) {
		pdf.Ln(3)
		pdf.SetFont("Helvetica", "B", 12)
		pdf.CellFormat(0, 7, tr(t), "", 1, "L", false, 0, "")
		pdf.SetFont("Helvetica", "", 8.5)
	}
	table := func(widths []float64, head []string, rows [][]string) {
		pdf.SetFont("Helvetica", "B", 8.5)
		pdf.SetFillColor(232, 236, 240)
		for i, h := range head {
			pdf.CellFormat(widths[i], 6, tr(h), "1", 0, "L", true, 0, "")
		}
		pdf.Ln(-1)
		pdf.SetFont("Helvetica", "", 8.5)
		for _, r := range rows {
			for i, v := range r {
				pdf.CellFormat(widths[i], 5.5, tr(clip(v, int(widths[i]*0.55))), "1", 0, "L", false, 0, "")
			}
			pdf.Ln(-1)
		}
	}

	heading("Checks done")
	var rows [][]string
	for i := len(checks) - 1; i >= 0; i-- {
		ch := checks[i]
		rows = append(rows, []string{ch.MeasuredAt.Local().Format("2006-01-02 15:04"), labels[ch.BeamID], string(ch.Kind), ch.Device, ch.Operator})
	}
	if len(rows) == 0 {
		rows = append(rows, []string{"no checks recorded this month", "", "", "", ""})
	}
	table([]float64{32, 28, 26, 50, 54}, []string{"Measured", "Beam", "Kind", "Device", "Operator"}, rows)

	heading("Checks missing")
	rows = nil
	for _, r := range md.Rows {
		monthly := "done"
		if len(r.Monthly) == 0 {
			monthly = "MISSING"
		}
		missing := strings.Join(r.MissingMorning, ", ")
		if missing == "" {
			missing = "none"
		}
		rows = append(rows, []string{r.Beam.Label, monthly, strconv.Itoa(r.MorningDays), missing})
	}
	table([]float64{28, 26, 26, 110}, []string{"Beam", "Monthly check", "Morning days", "Weekdays without a morning check"}, rows)

	heading("Deviations from baseline against tolerance")
	rows = nil
	type inMonth struct {
		v    seriesView
		from int
		to   int
	}
	var charted []inMonth
	for _, v := range views {
		lo, hi := -1, -1
		for i, p := range v.Points {
			if !p.MeasuredAt.Before(from) && p.MeasuredAt.Before(to) {
				if lo < 0 {
					lo = i
				}
				hi = i + 1
			}
		}
		if lo < 0 {
			continue
		}
		last := v.Points[hi-1]
		dev, lim, lvl := "—", "not set", levelText(halfmark.LevelInControl, false)
		if v.HasCentre && hi-1 >= v.Start {
			d := last.Value - v.Centre
			dev = signed(d)
			lvl = levelText(pointLevel(v, d), false)
		} else {
			lvl = "no baseline"
		}
		if v.HasLimits {
			lim = "±" + mm(v.Limits.ToleranceMM) + " / ±" + mm(v.Limits.ActionMM)
		}
		rows = append(rows, []string{labels[v.S.BeamID], v.S.Edge + " " + string(v.S.Quantity), v.S.Geometry, strconv.Itoa(hi - lo),
			mm(last.Value), dev, lim, lvl})
		if len(charted) < reportMaxCharts {
			charted = append(charted, inMonth{v, lo, hi})
		}
	}
	if len(rows) == 0 {
		rows = append(rows, []string{"no points this month", "", "", "", "", "", "", ""})
	}
	table([]float64{18, 30, 34, 10, 18, 18, 28, 34}, []string{"Beam", "Series", "Geometry", "n", "Last mm", "Dev. mm", "Tol / action", "Level"}, rows)

	heading("Alerts and their handling")
	rows = nil
	if s.d.Alerts == nil {
		rows = append(rows, []string{"alerts not available on this server", "", "", "", ""})
	}
	for _, a := range alerts {
		h := ""
		if a.AckBy != "" {
			h += "ack " + a.AckBy + ": " + a.AckComment + ". "
		}
		if a.ResolvedBy != "" {
			h += "resolved " + a.ResolvedBy + ": " + a.ResolveComment
		}
		rows = append(rows, []string{levelText(a.Level, false), a.BeamLabel + " " + a.Edge, a.Rule, string(a.State), h})
	}
	if len(rows) == 0 {
		rows = append(rows, []string{"no alerts this month", "", "", "", ""})
	}
	table([]float64{40, 26, 34, 22, 68}, []string{"Level", "Beam · edge", "Rule", "State", "Handling"}, rows)

	if len(charted) > 0 {
		heading("Charts")
		pdf.SetFont("Helvetica", "", 8)
		pdf.MultiCell(0, 4, tr("Each chart: values (dots), signalled points (triangles), baseline (solid), control limits (dashed; ±3σ widened for the number of series of the machine, as the drift engine does), tolerance band (green) and action band (orange)."), "", "L", false)
		now := s.d.Now()
		for i, cm := range charted {
			v := cm.v
			v.Points = v.Points[cm.from:cm.to]
			v.Signal = v.Signal[cm.from:cm.to]
			v.Start = max(0, v.Start-cm.from)
			v.Trend, v.Crossing = nil, nil
			t := labels[v.S.BeamID] + " " + v.S.Edge + " " + string(v.S.Quantity) + " · " + v.S.Geometry
			png, err := pngChart(valuePlot(withTitle(specFor(v, false, now), t)), vg.Points(380), vg.Points(150))
			if err != nil {
				return s.failErr(c, err)
			}
			name := fmt.Sprintf("chart%d", i)
			pdf.RegisterImageOptionsReader(name, fpdf.ImageOptions{ImageType: "PNG"}, bytes.NewReader(png))
			if pdf.GetY() > 230 {
				pdf.AddPage()
			}
			pdf.ImageOptions(name, 15, pdf.GetY()+1, 180, 0, true, fpdf.ImageOptions{ImageType: "PNG"}, 0, "")
		}
	}

	heading("Sign-off")
	pdf.SetFont("Helvetica", "", 10)
	for _, e := range signs {
		comment, _ := e.Detail["comment"].(string)
		pdf.MultiCell(0, 5, tr(fmt.Sprintf("Signed by %s on %s. %s", e.Actor, e.At.Local().Format("2006-01-02 15:04"), comment)), "", "L", false)
	}
	pdf.Ln(8)
	pdf.CellFormat(0, 6, tr("Reviewed by (qualified medical physicist): ______________________________   Date: ______________"), "", 1, "L", false, 0, "")

	var buf bytes.Buffer
	if err := pdf.Output(&buf); err != nil {
		return s.failErr(c, err)
	}
	fn := fmt.Sprintf("halfmark-%s-%s.pdf", safeName(m.Name), month)
	c.Response().Header().Set("Content-Disposition", `attachment; filename="`+fn+`"`)
	return c.Blob(http.StatusOK, "application/pdf", buf.Bytes())
}

// pointLevel is the level of one deviation against the series' limits.
func pointLevel(v seriesView, d float64) halfmark.Level {
	if !v.HasLimits {
		return halfmark.LevelInControl
	}
	switch a := math.Abs(d); {
	case a > v.Limits.ActionMM:
		return halfmark.LevelImmediate
	case a > v.Limits.ToleranceMM:
		return halfmark.LevelScheduled
	}
	return halfmark.LevelInControl
}

func (s *server) signReport(c echo.Context) error {
	id, ok := paramID(c)
	if !ok {
		return s.fail(c, http.StatusNotFound, "There is no machine "+c.Param("id")+".")
	}
	if s.d.SignOffs == nil {
		return s.fail(c, http.StatusServiceUnavailable, "Report sign-off is not available on this server.")
	}
	month := strings.TrimSpace(c.FormValue("month"))
	if err := s.d.SignOffs.SignReport(c.Request().Context(), user(c).Actor(), id, month, strings.TrimSpace(c.FormValue("comment"))); err != nil {
		return s.failErr(c, err)
	}
	return c.Redirect(http.StatusSeeOther, fmt.Sprintf("/monthly?machine=%d&month=%s&signed=1", id, month))
}

func isASCII(s string) bool {
	for i := 0; i < len(s); i++ {
		if s[i] >= 0x80 {
			return false
		}
	}
	return true
}

func short(h string) string {
	if len(h) > 12 {
		return h[:12] + "…"
	}
	return h
}

func clip(s string, n int) string {
	r := []rune(s)
	if n > 3 && len(r) > n {
		return string(r[:n-1]) + "…"
	}
	return s
}

func safeName(s string) string {
	return strings.Map(func(r rune) rune {
		if r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z' || r >= '0' && r <= '9' || r == '-' {
			return r
		}
		return '_'
	}, s)
}
