package web

import (
	"bytes"
	"context"
	"fmt"
	"log/slog"
	"net/http"
	"sort"
	"strconv"
	"strings"
	"time"

	"codeberg.org/go-pdf/fpdf"
	"github.com/labstack/echo/v4"
	"gonum.org/v1/plot/vg"

	"halfmark"
)

// safetyCaution is printed on every page and in every report.
const safetyCaution = "Halfmark's results support, and never replace, the judgement of a qualified medical physicist. " +
	"Tolerances and action limits are set locally and are the local physicist's responsibility. " +
	"Follow your local regulations and licensed practice."

// Reporter renders a machine's monthly report from what the drift engine
// stored: findings (FindingService), series evaluations and their charts
// (EvaluationService), checks and series. It judges nothing itself.
type Reporter struct{ d Deps }

// NewReporter returns a renderer over the dashboard's services; the API
// uses it for GET /api/v1/machines/{id}/reports/{yyyy-mm}.
func NewReporter(d Deps) *Reporter {
	if d.Now == nil {
		d.Now = time.Now
	}
	if d.Log == nil {
		d.Log = slog.Default()
	}
	return &Reporter{d: d}
}

// reportData is everything one report shows.
type reportData struct {
	M           halfmark.Machine
	Month       string
	From, To    time.Time
	Beams       []halfmark.Beam
	Labels      map[int64]string
	Series      []halfmark.Series
	Evals       map[int64]*halfmark.SeriesEvaluation
	Points      map[int64][]halfmark.Point // series without a stored evaluation
	Findings    []halfmark.Finding
	NoFindings  bool // no FindingService on this server
	NoEvals     bool // no EvaluationService on this server
	Checks      []halfmark.Check
	CheckRows   []reportCheckRow
	Components  []componentRow
	LeafSummary string
	Blockers    []string
}

type reportCheckRow struct {
	Beam, Kind, Done, Missing string
}

type componentRow struct {
	Component string
	Level     string
	Detail    string
}

func (r *Reporter) gather(ctx context.Context, machineID int64, month string) (*reportData, error) {
	from, to, err := halfmark.ParseReportMonth(month, time.Local)
	if err != nil {
		return nil, err
	}
	m, err := r.d.Machines.Machine(ctx, machineID)
	if err != nil {
		return nil, err
	}
	d := &reportData{M: m, Month: month, From: from, To: to, Labels: map[int64]string{},
		Evals: map[int64]*halfmark.SeriesEvaluation{}, Points: map[int64][]halfmark.Point{}}
	if d.Beams, err = r.d.Machines.Beams(ctx, machineID); err != nil {
		return nil, err
	}
	for _, b := range d.Beams {
		d.Labels[b.ID] = b.Label
	}
	if d.Series, err = r.d.Series.MachineSeries(ctx, machineID); err != nil {
		return nil, err
	}
	sort.SliceStable(d.Series, func(i, j int) bool { return seriesLess(d.Series[i], d.Series[j]) })
	d.NoEvals = r.d.Evaluations == nil
	for _, s := range d.Series {
		if r.d.Evaluations != nil {
			ev, err := r.d.Evaluations.SeriesEvaluation(ctx, s.ID)
			switch halfmark.ErrorCodeOf(err) {
			case "":
				d.Evals[s.ID] = &ev
				continue
			case halfmark.ENotFound:
			default:
				return nil, err
			}
		}
		pts, err := r.d.Series.Points(ctx, s.ID)
		if err != nil {
			return nil, err
		}
		d.Points[s.ID] = pts
	}
	if r.d.Findings == nil {
		d.NoFindings = true
	} else {
		all, err := r.d.Findings.Findings(ctx, halfmark.FindingFilter{MachineID: machineID, State: "all", Limit: 10000})
		if err != nil {
			return nil, err
		}
		for _, f := range all {
			if activeDuring(f, from, to) {
				d.Findings = append(d.Findings, f)
			}
		}
	}
	if d.Checks, err = r.d.Checks.Checks(ctx, halfmark.CheckFilter{MachineID: machineID, From: from, To: to, Limit: 100000}); err != nil {
		return nil, err
	}
	d.checkRows(r.d.Now())
	d.componentRows()
	return d, nil
}

// seriesLess orders series by beam, quantity, geometry, then jaws before
// leaves and leaves by bank and pair.
func seriesLess(a, b halfmark.Series) bool {
	if a.BeamID != b.BeamID {
		return a.BeamID < b.BeamID
	}
	if a.Quantity != b.Quantity {
		return a.Quantity < b.Quantity
	}
	if a.Geometry != b.Geometry {
		return a.Geometry < b.Geometry
	}
	ea, _ := halfmark.ParseEdge(a.Edge)
	eb, _ := halfmark.ParseEdge(b.Edge)
	if ea.Bank != eb.Bank {
		return ea.Bank < eb.Bank
	}
	if ea.LeafPair != eb.LeafPair {
		return ea.LeafPair < eb.LeafPair
	}
	return a.Edge < b.Edge
}

// activeDuring reports whether a finding's fault was present at any time
// in [from, to): it was opened, or its change began (the engine's onset),
// before to, and it was not resolved before from. A finding opened after
// the month whose onset lies in or before it belongs to the month: the
// fault was there, it was only seen later.
func activeDuring(f halfmark.Finding, from, to time.Time) bool {
	began := f.OpenedAt.Before(to) || (f.Onset != nil && f.Onset.Before(to))
	return began && (f.ResolvedAt == nil || !f.ResolvedAt.Before(from))
}

// activeAt reports whether a finding's fault was present at t.
func activeAt(f halfmark.Finding, t time.Time) bool { return activeDuring(f, t, t) }

// checkRows lists, per beam, the checks done by kind and what is missing:
// the monthly check, and the weekdays (up to today) without a morning
// check. Each missing item is a blocker of signing.
func (d *reportData) checkRows(now time.Time) {
	for _, b := range d.Beams {
		byKind := map[halfmark.CheckKind][]halfmark.Check{}
		for _, c := range d.Checks {
			if c.BeamID == b.ID && c.SupersededBy == "" {
				byKind[c.Kind] = append(byKind[c.Kind], c)
			}
		}
		for _, k := range halfmark.CheckKinds {
			cs := byKind[k]
			row := reportCheckRow{Beam: b.Label, Kind: string(k)}
			days := map[string]bool{}
			var dates []string
			for i := len(cs) - 1; i >= 0; i-- {
				day := cs[i].MeasuredAt.In(d.From.Location()).Format("2006-01-02")
				if !days[day] {
					dates = append(dates, day[8:])
				}
				days[day] = true
			}
			if len(cs) > 0 {
				row.Done = fmt.Sprintf("%d (days %s)", len(cs), strings.Join(dates, ", "))
			} else {
				row.Done = "none"
			}
			switch k {
			case halfmark.KindMorning:
				var miss []string
				for day := d.From; day.Before(d.To) && !day.After(now); day = day.AddDate(0, 0, 1) {
					if wd := day.Weekday(); wd == time.Saturday || wd == time.Sunday {
						continue
					}
					if !days[day.Format("2006-01-02")] {
						miss = append(miss, day.Format("2006-01-02"))
					}
				}
				if len(miss) > 0 {
					row.Missing = fmt.Sprintf("%d weekdays without a morning check: %s", len(miss), strings.Join(miss, ", "))
					d.Blockers = append(d.Blockers, fmt.Sprintf("%s: %d weekdays without a morning check", b.Label, len(miss)))
				}
			case halfmark.KindMonthly:
				if len(cs) == 0 {
					row.Missing = "the monthly check is missing"
					d.Blockers = append(d.Blockers, b.Label+": the monthly check is missing")
				}
			default:
				if len(cs) == 0 {
					continue // not required every month
				}
			}
			d.CheckRows = append(d.CheckRows, row)
		}
	}
}

// verdictRank orders verdict words from the least to the most in need of
// attention, so that a component reads as its least reassuring series.
var verdictRank = map[string]int{halfmark.VerdictInControl: 0, halfmark.VerdictWithinTolerance: 1,
	halfmark.VerdictBaselinePending: 2, halfmark.VerdictNotEvaluated: 3, "": 3, halfmark.VerdictSignal: 4}

// componentRows gives each component its level at the end of the month:
// the worst finding active then, or, without one, the least reassuring of
// the verdict words the engine stored for its series. Leaf ends without a
// finding are summarised in one line.
func (d *reportData) componentRows() {
	type agg struct {
		c       halfmark.Component
		verdict string
		level   halfmark.Level
		series  int
	}
	byKey := map[string]*agg{}
	var order []string
	for _, s := range d.Series {
		verdict, lvl := halfmark.VerdictNotEvaluated, halfmark.LevelInControl
		if ev := d.Evals[s.ID]; ev != nil {
			verdict, lvl = ev.Verdict, ev.Level
		}
		for _, c := range halfmark.ComponentsOf(s.Quantity, s.Edge, d.Labels[s.BeamID]) {
			k := c.String()
			a := byKey[k]
			if a == nil {
				a = &agg{c: c, verdict: verdict, level: lvl}
				byKey[k] = a
				order = append(order, k)
			} else if verdictRank[verdict] > verdictRank[a.verdict] {
				a.verdict = verdict
			}
			a.level = max(a.level, lvl)
			a.series++
		}
	}
	atEnd := map[string][]halfmark.Finding{}
	for _, f := range d.Findings {
		if activeAt(f, d.To) {
			k := f.Component.String()
			atEnd[k] = append(atEnd[k], f)
			if _, ok := byKey[k]; !ok {
				byKey[k] = &agg{c: f.Component}
				order = append(order, k)
			}
			if f.Level >= halfmark.LevelScheduled {
				d.Blockers = append(d.Blockers, fmt.Sprintf("finding #%d (%s %s) at %s active at the end of the month", f.ID,
					kindName(f.Kind), f.Name, f.Level))
			}
		}
	}
	rank := map[halfmark.ComponentKind]int{}
	for i, k := range halfmark.ComponentKinds {
		rank[k] = i
	}
	sort.SliceStable(order, func(i, j int) bool { return rank[byKey[order[i]].c.Kind] < rank[byKey[order[j]].c.Kind] })
	leafWords := map[string]int{}
	leaves := 0
	for _, k := range order {
		a := byKey[k]
		fs := atEnd[k]
		if len(fs) == 0 && a.c.Kind == halfmark.ComponentMLCLeaf {
			leaves++
			leafWords[verdictWord(a.verdict, a.level)]++
			continue
		}
		row := componentRow{Component: kindName(a.c.Kind) + " " + a.c.Name}
		if len(fs) > 0 {
			worst := fs[0]
			for _, f := range fs {
				if f.Level > worst.Level {
					worst = f
				}
			}
			row.Level = worst.Level.String()
			var ids []string
			for _, f := range fs {
				ids = append(ids, fmt.Sprintf("#%d (%s)", f.ID, f.State))
			}
			row.Detail = "finding " + strings.Join(ids, ", ")
		} else {
			row.Level = verdictWord(a.verdict, a.level)
			row.Detail = fmt.Sprintf("no finding; %d series, verdict of the drift engine", a.series)
			if a.verdict == halfmark.VerdictSignal {
				row.Detail = fmt.Sprintf("no finding; a series of it is at %s (evidence pending a finding)", a.level)
			}
		}
		d.Components = append(d.Components, row)
	}
	if leaves > 0 {
		var parts []string
		for _, w := range []string{"in control", "within tolerance", "baseline pending", "not evaluated"} {
			if n := leafWords[w]; n > 0 {
				parts = append(parts, fmt.Sprintf("%d %s", n, w))
				delete(leafWords, w)
			}
		}
		var rest []string
		for w, n := range leafWords {
			rest = append(rest, fmt.Sprintf("%d %s", n, w))
		}
		sort.Strings(rest)
		parts = append(parts, rest...)
		d.LeafSummary = fmt.Sprintf("Leaf ends without a finding: %d (%s).", leaves, strings.Join(parts, ", "))
	}
}

// verdictWord is a verdict in the report's summary table.
func verdictWord(v string, l halfmark.Level) string {
	switch v {
	case halfmark.VerdictInControl:
		return "in control"
	case halfmark.VerdictWithinTolerance:
		return "within tolerance"
	case halfmark.VerdictBaselinePending:
		return "baseline pending"
	case halfmark.VerdictSignal:
		return l.String()
	}
	return "not evaluated"
}

func kindName(k halfmark.ComponentKind) string {
	switch k {
	case halfmark.ComponentJaw:
		return "jaw"
	case halfmark.ComponentMLCBank:
		return "MLC"
	case halfmark.ComponentMLCLeaf:
		return "leaf"
	case halfmark.ComponentPenumbra:
		return "penumbra"
	case halfmark.ComponentLightField:
		return "light field"
	}
	return string(k)
}

// reportCrossingText says when a trend reaches the limits, as the engine stated.
func reportCrossingText(c halfmark.FindingCrossing) string {
	day := func(t *time.Time) string {
		if t == nil {
			return "open"
		}
		return t.Format("2006-01-02")
	}
	switch c.Status {
	case halfmark.CrossingAlreadyBeyond:
		return "already beyond tolerance"
	case halfmark.CrossingProjected:
		s := "trend projected to reach tolerance on " + day(c.ToleranceDate)
		if c.ToleranceInterval[0] != nil || c.ToleranceInterval[1] != nil {
			s += " (95% interval " + day(c.ToleranceInterval[0]) + " to " + day(c.ToleranceInterval[1]) + ")"
		}
		if c.ActionDate != nil {
			s += ", the action limit on " + day(c.ActionDate)
		}
		return s
	case halfmark.CrossingNotSignificant:
		return "no significant trend"
	case halfmark.CrossingBeyondHorizon:
		return "trend significant, crossing beyond the horizon"
	}
	return ""
}

// handlingText is a finding's lifecycle: who acknowledged or resolved it,
// when, and what they wrote.
func handlingText(f halfmark.Finding) string {
	var parts []string
	if f.AckBy != "" {
		p := "acknowledged by " + f.AckBy
		if f.AckAt != nil {
			p += " " + f.AckAt.Local().Format("2006-01-02 15:04")
		}
		if f.AckComment != "" {
			p += ": " + f.AckComment
		}
		parts = append(parts, p)
	}
	if f.ResolvedAt != nil || f.ResolvedBy != "" {
		p := "resolved"
		if f.ResolvedBy != "" {
			p += " by " + f.ResolvedBy
		}
		if f.ResolvedAt != nil {
			p += " " + f.ResolvedAt.Local().Format("2006-01-02 15:04")
		}
		if f.ResolveComment != "" {
			p += ": " + f.ResolveComment
		}
		parts = append(parts, p)
	}
	if len(parts) == 0 {
		return "not yet handled"
	}
	return strings.Join(parts, "; ")
}

// RenderReport implements halfmark.ReportRenderer.
func (r *Reporter) RenderReport(ctx context.Context, machineID int64, month string) (halfmark.ReportDraft, error) {
	d, err := r.gather(ctx, machineID, month)
	if err != nil {
		return halfmark.ReportDraft{}, err
	}
	pdf, err := r.render(d)
	if err != nil {
		return halfmark.ReportDraft{}, err
	}
	return halfmark.ReportDraft{MachineID: machineID, Month: month, PDF: pdf, Blockers: d.Blockers}, nil
}

// pdfText turns text into the core fonts' code page 1252, which lacks the
// minus sign, σ, λ and a few more.
var pdfASCII = strings.NewReplacer("−", "-", "σ", "sigma", "≤", "<=", "≥", ">=", "λ", "lambda", "→", "->", "≈", "~")

// report is one PDF being written, with the helpers that keep every text
// whole: long texts wrap, they are never cut.
type report struct {
	pdf   *fpdf.Fpdf
	tr    func(string) string
	left  float64
	width float64
	n     int // images registered
}

const (
	pageBottom = 297 - 20 // mm: content ends here; the footer is below
	lineMM     = 3.8
)

// wrap splits translated text into lines no wider than w mm at the current
// font, breaking at spaces and, for a word wider than a line, inside it.
func (p *report) wrap(s string, w float64) []string {
	var lines []string
	for _, para := range strings.Split(s, "\n") {
		line := ""
		for _, word := range strings.Fields(para) {
			cand := word
			if line != "" {
				cand = line + " " + word
			}
			if p.pdf.GetStringWidth(cand) <= w {
				line = cand
				continue
			}
			if line != "" {
				lines = append(lines, line)
			}
			for p.pdf.GetStringWidth(word) > w {
				n := len(word) - 1
				for n > 1 && p.pdf.GetStringWidth(word[:n]) > w {
					n--
				}
				lines = append(lines, word[:n])
				word = word[n:]
			}
			line = word
		}
		lines = append(lines, line)
	}
	return lines
}

// text writes a paragraph across the page width, wrapped.
func (p *report) text(s string, size float64, style string) {
	p.pdf.SetFont("Helvetica", style, size)
	h := size * 0.45
	for _, l := range p.wrap(p.tr(s), p.width) {
		p.room(h)
		p.pdf.SetX(p.left)
		p.pdf.CellFormat(p.width, h, l, "", 1, "L", false, 0, "")
	}
}

// room starts a new page unless h mm fit above the bottom.
func (p *report) room(h float64) bool {
	if p.pdf.GetY()+h > pageBottom {
		p.pdf.AddPage()
		return true
	}
	return false
}

func (p *report) heading(t string) {
	p.room(14)
	p.pdf.Ln(3)
	p.text(t, 12, "B")
	p.pdf.Ln(1)
}

// table writes rows whose cells wrap; a row never splits across pages and
// the header repeats on a new page.
func (p *report) table(widths []float64, head []string, rows [][]string) {
	var row func(cells []string, bold bool)
	row = func(cells []string, bold bool) {
		style := ""
		if bold {
			style = "B"
		}
		p.pdf.SetFont("Helvetica", style, 8)
		lines := make([][]string, len(cells))
		n := 1
		for i, c := range cells {
			lines[i] = p.wrap(p.tr(c), widths[i]-2)
			n = max(n, len(lines[i]))
		}
		h := float64(n)*lineMM + 1.2
		if p.room(h) && !bold {
			row(head, true)
			p.pdf.SetFont("Helvetica", style, 8)
		}
		x, y := p.left, p.pdf.GetY()
		for i := range cells {
			if bold {
				p.pdf.SetFillColor(232, 236, 240)
				p.pdf.Rect(x, y, widths[i], h, "FD")
			} else {
				p.pdf.Rect(x, y, widths[i], h, "D")
			}
			for j, l := range lines[i] {
				p.pdf.SetXY(x+1, y+0.6+float64(j)*lineMM)
				p.pdf.CellFormat(widths[i]-2, lineMM, l, "", 0, "L", false, 0, "")
			}
			x += widths[i]
		}
		p.pdf.SetXY(p.left, y+h)
	}
	row(head, true)
	for _, r := range rows {
		row(r, false)
	}
}

func (r *Reporter) render(d *reportData) ([]byte, error) {
	pdf := fpdf.New("P", "mm", "A4", "")
	cp := pdf.UnicodeTranslatorFromDescriptor("")
	p := &report{pdf: pdf, tr: func(s string) string { return cp(pdfASCII.Replace(s)) }, left: 15, width: 180}
	title := "Halfmark monthly report: " + d.M.Name + " " + d.Month
	pdf.SetTitle(title, !isASCII(title))
	pdf.SetAuthor("Halfmark", false)
	pdf.SetCreator("Halfmark", false)
	pdf.SetSubject("Beam edge QA, "+d.Month, false)
	pdf.SetCreationDate(r.d.Now())
	pdf.SetMargins(15, 18, 15)
	pdf.SetAutoPageBreak(false, 20)
	pdf.AliasNbPages("{nb}")
	pdf.SetHeaderFunc(func() {
		pdf.SetFont("Helvetica", "", 8)
		pdf.SetTextColor(70, 80, 90)
		pdf.SetXY(15, 8)
		pdf.CellFormat(120, 4, p.tr("Halfmark monthly report · "+d.M.Name+" · "+d.Month), "", 0, "L", false, 0, "")
		pdf.CellFormat(60, 4, fmt.Sprintf("page %d of {nb}", pdf.PageNo()), "", 0, "R", false, 0, "")
		pdf.Line(15, 13, 195, 13)
		pdf.SetTextColor(0, 0, 0)
		pdf.SetXY(15, 18)
	})
	pdf.SetFooterFunc(func() {
		pdf.SetFont("Helvetica", "", 6.5)
		pdf.SetTextColor(90, 100, 110)
		y := 297 - 17.0
		for _, l := range p.wrap(p.tr(safetyCaution), 180) {
			pdf.SetXY(15, y)
			pdf.CellFormat(180, 2.8, l, "", 0, "L", false, 0, "")
			y += 2.8
		}
		pdf.SetXY(15, y)
		pdf.CellFormat(180, 2.8, p.tr(fmt.Sprintf("%s · %s · page %d of {nb}", d.M.Name, d.Month, pdf.PageNo())), "", 0, "R", false, 0, "")
		pdf.SetTextColor(0, 0, 0)
	})
	pdf.AddPage()
	p.text("Monthly QA report: "+d.M.Name+", "+d.Month, 16, "B")
	about := []string{}
	if d.M.Model != "" {
		about = append(about, d.M.Model)
	}
	if d.M.Serial != "" {
		about = append(about, "serial "+d.M.Serial)
	}
	about = append(about, fmt.Sprintf("SAD %g cm", d.M.SADcm))
	p.text(fmt.Sprintf("Machine %s (%s). Month %s (%s to %s). Produced %s.", d.M.Name, strings.Join(about, ", "),
		d.Month, d.From.Format("2006-01-02"), d.To.AddDate(0, 0, -1).Format("2006-01-02"), r.d.Now().Local().Format("2006-01-02 15:04")), 9, "")
	tol := "Tolerance book: " + r.d.Tolerances.Source() + ", SHA-256 " + r.d.Tolerances.Hash() + "."
	if r.d.Tolerances.IsShippedExample() {
		tol += " This is the SHIPPED EXAMPLE tolerance book: the local physicist must set and approve the tolerances."
	}
	p.text(tol, 9, "")
	p.pdf.Ln(1)
	p.text("Safety caution. "+safetyCaution, 8.5, "B")

	p.heading("Level of each component at the end of the month")
	if d.NoFindings {
		p.text("Findings are not available on this server: levels below are the drift engine's verdicts per series only.", 8.5, "I")
	}
	var rows [][]string
	for _, c := range d.Components {
		rows = append(rows, []string{c.Component, c.Level, c.Detail})
	}
	if len(rows) == 0 {
		rows = append(rows, []string{"no series recorded", "", ""})
	}
	p.table([]float64{45, 55, 80}, []string{"Component", "Level or verdict", "Basis"}, rows)
	if d.LeafSummary != "" {
		p.pdf.Ln(1)
		p.text(d.LeafSummary, 8.5, "")
	}
	p.text("Verdict words are the drift engine's: \"in control\" where the control-chart tests ran and passed, "+
		"\"within tolerance\" where only the limits could be checked, \"baseline pending\" while the baseline is being established. "+
		"Component verdicts are the engine's latest stored evaluation; findings are those active at the end of the month.", 7.5, "I")

	p.heading("Findings active at any time in the month, and their handling")
	rows = nil
	for _, f := range d.Findings {
		onset := "—"
		if f.Onset != nil {
			onset = f.Onset.Format("2006-01-02")
		}
		mag := fmt.Sprintf("%s mm (95%%: %s to %s)", signed(f.MagnitudeMM), signed(f.MagnitudeCIMM[0]), signed(f.MagnitudeCIMM[1]))
		what := fmt.Sprintf("#%d %s %s. %s", f.ID, kindName(f.Kind), f.Name, plainNumbers(f.Message))
		rows = append(rows, []string{what, f.Level.String(), string(f.State),
			openedText(f, d.To) + "; onset " + onset,
			mag + ". " + reportCrossingText(f.Crossing), handlingText(f)})
	}
	if d.NoFindings {
		rows = append(rows, []string{"findings are not available on this server", "", "", "", "", ""})
	} else if len(rows) == 0 {
		rows = append(rows, []string{"no finding was active in this month", "", "", "", "", ""})
	}
	p.table([]float64{42, 22, 18, 24, 38, 36}, []string{"Finding", "Level", "State", "Dates", "Magnitude, crossing", "Handling"}, rows)

	p.heading("Checks done and missing")
	rows = nil
	for _, c := range d.CheckRows {
		miss := c.Missing
		if miss == "" {
			miss = "none"
		}
		rows = append(rows, []string{c.Beam, c.Kind, c.Done, miss})
	}
	p.table([]float64{26, 24, 60, 70}, []string{"Beam", "Kind", "Done", "Missing"}, rows)

	p.heading("Sign-off")
	if len(d.Blockers) > 0 {
		p.text("Signing this month needs an explicit reason, stored with the signature, because of:", 9, "")
		for _, b := range d.Blockers {
			p.text("- "+b, 8.5, "")
		}
	} else {
		p.text("No required check is missing and no Level 2 or 3 finding was active at the end of the month.", 9, "")
	}
	p.text("This is the document as rendered on "+r.d.Now().Local().Format("2006-01-02 15:04")+". Signing stores these exact bytes with their SHA-256; "+
		"the signed copy, who signed it and when are kept by Halfmark and are shown where it is downloaded.", 8.5, "")

	if err := r.charts(p, d); err != nil {
		return nil, err
	}
	var buf bytes.Buffer
	if err := pdf.Output(&buf); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

// chartOf is the engine's chart of a series, or its plain values when the
// engine has not evaluated it yet.
func (d *reportData) chartOf(s halfmark.Series) (halfmark.SeriesChart, *halfmark.SeriesEvaluation) {
	if ev := d.Evals[s.ID]; ev != nil {
		return ev.Chart, ev
	}
	var ch halfmark.SeriesChart
	for _, pt := range d.Points[s.ID] {
		ch.Points = append(ch.Points, halfmark.ChartPoint{Time: pt.MeasuredAt, ValueMM: pt.Value, CheckID: pt.CheckID, Kind: pt.Kind})
	}
	return ch, nil
}

func (d *reportData) inMonth(ch halfmark.SeriesChart) int {
	n := 0
	for _, pt := range ch.Points {
		if !pt.Time.Before(d.From) && pt.Time.Before(d.To) {
			n++
		}
	}
	return n
}

// image places a PNG at (x, y) w mm wide.
func (p *report) image(png []byte, x, y, w float64) {
	p.n++
	name := "chart" + strconv.Itoa(p.n)
	p.pdf.RegisterImageOptionsReader(name, fpdf.ImageOptions{ImageType: "PNG"}, bytes.NewReader(png))
	p.pdf.ImageOptions(name, x, y, w, 0, false, fpdf.ImageOptions{ImageType: "PNG"}, 0, "")
}

// caption writes wrapped lines in a column; it returns the y below them.
func (p *report) caption(s string, x, y, w float64, style string) float64 {
	p.pdf.SetFont("Helvetica", style, 7)
	for _, l := range p.wrap(p.tr(s), w) {
		p.pdf.SetXY(x, y)
		p.pdf.CellFormat(w, 3, l, "", 0, "L", false, 0, "")
		y += 3
	}
	return y
}

// seriesCaption is the engine's verdict on a series and its projection.
func seriesCaption(ev *halfmark.SeriesEvaluation, n int) string {
	if ev == nil {
		return plural(n, "point") + " this month. Not evaluated by the drift engine yet: values only."
	}
	s := fmt.Sprintf("%s this month. Verdict (%s): %s", plural(n, "point"), ev.EvaluatedAt.Local().Format("2006-01-02"), verdictWord(ev.Verdict, ev.Level))
	if ev.Rule != "" {
		s += ": " + plainNumbers(ev.Rule)
	}
	s += "."
	if ev.DeviationMM != nil {
		s += " Newest deviation " + signed(*ev.DeviationMM) + " mm."
	}
	if c := reportCrossingText(ev.Crossing); c != "" {
		s += " " + strings.ToUpper(c[:1]) + c[1:] + "."
	}
	return s
}

// charts draws every series with points in the month: jaws, penumbrae and
// light offsets as small multiples per beam, MLC leaves as one chart per
// bank and image. Nothing is capped; series without points this month are
// named.
func (r *Reporter) charts(p *report, d *reportData) error {
	pdf := p.pdf
	pdf.AddPage()
	p.text("Charts", 14, "B")
	p.text("Each panel shows this month's values (dots) with the drift engine's centre (solid), control limits (blue dashed), "+
		"tolerance band (green) and action band (orange); triangles mark points on which a rule fired. Time axes span the month. "+
		"Leaf charts show each leaf end's deviation from its baseline (leaf error) against its leaf pair, one chart per bank and image.", 8, "")
	var idle []string
	for _, b := range d.Beams {
		var panels []halfmark.Series
		type leafKey struct {
			geometry string
			bank     int
			check    string
		}
		type leafPt struct {
			pair   int
			dev    float64
			signal bool
		}
		leafGroups := map[leafKey][]leafPt{}
		leafTime := map[leafKey]time.Time{}
		leafTol := map[leafKey]*float64{}
		leafPending := map[leafKey]int{}
		leafRaw := map[leafKey][]leafPt{} // positions of leaf ends without a judged deviation
		var leafOrder []leafKey
		for _, s := range d.Series {
			if s.BeamID != b.ID {
				continue
			}
			ch, ev := d.chartOf(s)
			n := d.inMonth(ch)
			if n == 0 {
				idle = append(idle, b.Label+" "+s.Edge+" "+string(s.Quantity)+" "+s.Geometry)
				continue
			}
			e, _ := halfmark.ParseEdge(s.Edge)
			if e.Bank == 0 || s.Quantity != halfmark.QPosition {
				panels = append(panels, s)
				continue
			}
			for _, pt := range ch.Points {
				if pt.Time.Before(d.From) || !pt.Time.Before(d.To) {
					continue
				}
				k := leafKey{s.Geometry, e.Bank, pt.CheckID}
				if pt.CheckID == "" {
					k.check = pt.Time.Format(time.RFC3339)
				}
				if _, ok := leafTime[k]; !ok {
					leafOrder = append(leafOrder, k)
					leafTime[k] = pt.Time
				}
				if ev == nil || ev.Verdict == halfmark.VerdictBaselinePending {
					leafPending[k]++
					leafRaw[k] = append(leafRaw[k], leafPt{e.LeafPair, pt.ValueMM, false})
					continue
				}
				if ev.Limits != nil && leafTol[k] == nil {
					t := ev.Limits.ToleranceMM
					leafTol[k] = &t
				}
				leafGroups[k] = append(leafGroups[k], leafPt{e.LeafPair, pt.DeviationMM, len(pt.Signals) > 0})
			}
		}
		if len(panels) > 0 {
			p.heading(b.Label + ": jaws, penumbrae and light field")
			const colW, imgH = 88.0, 88.0 * 150 / 255
			col := 0
			rowTop, rowBottom := pdf.GetY(), pdf.GetY()
			for _, s := range panels {
				ch, ev := d.chartOf(s)
				capt := seriesCaption(ev, d.inMonth(ch))
				pdf.SetFont("Helvetica", "", 7)
				title := s.Edge + " " + string(s.Quantity) + " · " + s.Geometry
				need := imgH + float64(len(p.wrap(p.tr(capt), colW))+len(p.wrap(p.tr(title), colW)))*3 + 3
				if col == 0 {
					pdf.SetY(rowBottom)
					if p.room(need) {
						rowBottom = pdf.GetY()
					}
					rowTop = rowBottom
				}
				view := engineView{From: d.From, To: d.To, Compact: true}
				if ev != nil {
					view.Trend = ev.Trend
				}
				png, err := pngChart(enginePlot(ch, view), vg.Points(255), vg.Points(150))
				if err != nil {
					return err
				}
				x := p.left + float64(col)*(colW+4)
				pdf.SetFont("Helvetica", "B", 7.5)
				top := p.caption(title, x, rowTop, colW, "B")
				p.image(png, x, top, colW)
				y := p.caption(capt, x, top+imgH+0.5, colW, "")
				rowBottom = max(rowBottom, y+3)
				col = (col + 1) % 2
			}
			pdf.SetY(rowBottom)
		}
		sort.SliceStable(leafOrder, func(i, j int) bool {
			a, c := leafOrder[i], leafOrder[j]
			if a.bank != c.bank {
				return a.bank < c.bank
			}
			return leafTime[a].Before(leafTime[c])
		})
		if len(leafOrder) > 0 {
			p.room(14 + 180*140/380 + 11)
			p.heading(b.Label + ": MLC leaves")
		}
		for _, k := range leafOrder {
			pts, ylabel, tol := leafGroups[k], "leaf error (mm)", leafTol[k]
			if len(pts) == 0 {
				// Nothing judged yet: the positions themselves, not a deviation.
				pts, ylabel, tol = leafRaw[k], "leaf end position (mm)", nil
			}
			sort.Slice(pts, func(i, j int) bool { return pts[i].pair < pts[j].pair })
			pairs, devs, sig := make([]int, len(pts)), make([]float64, len(pts)), make([]bool, len(pts))
			nsig := 0
			for i, q := range pts {
				pairs[i], devs[i], sig[i] = q.pair, q.dev, q.signal
				if q.signal {
					nsig++
				}
			}
			title := fmt.Sprintf("%s · bank %d · %s · image %s", b.Label, k.bank, k.geometry, leafTime[k].Local().Format("2006-01-02 15:04"))
			capt := fmt.Sprintf("%s judged by the drift engine, %d with a rule firing.", plural(len(leafGroups[k]), "leaf end"), nsig)
			if n := leafPending[k]; n > 0 {
				capt += fmt.Sprintf(" %s without a deviation yet (baseline pending or not evaluated).", plural(n, "leaf end"))
				if len(leafGroups[k]) == 0 {
					capt += " The chart shows their positions."
				}
			}
			const w, h = 180.0, 180.0 * 140 / 380
			p.room(h + 11)
			png, err := pngChart(leafPlot("", ylabel, pairs, devs, sig, tol), vg.Points(380), vg.Points(140))
			if err != nil {
				return err
			}
			y := p.caption(title, p.left, pdf.GetY(), w, "B")
			p.image(png, p.left, y, w)
			pdf.SetY(p.caption(capt, p.left, y+h+0.5, w, "") + 3)
		}
	}
	if len(idle) > 0 {
		p.heading("Series without points this month")
		p.text(strings.Join(idle, "; ")+".", 8, "")
	}
	return nil
}

// reportPage is the dashboard's page of one monthly report.
type reportPage struct {
	Machine   halfmark.Machine
	Month     string
	Signed    *halfmark.SignedReport
	Blockers  []string
	Available bool // signed reports are kept on this server
	Problem   string
	Reason    string
}

// reportMonth reads :id and :month (or ?month=) of a report route.
func (s *server) reportMonth(c echo.Context) (int64, string, error) {
	id, ok := paramID(c)
	if !ok {
		return 0, "", halfmark.Errorf(halfmark.ENotFound, "There is no machine %s.", c.Param("id"))
	}
	month := c.Param("month")
	if month == "" {
		month = strings.TrimSpace(c.QueryParam("month"))
	}
	if month == "" {
		month = strings.TrimSpace(c.FormValue("month"))
	}
	if _, _, err := halfmark.ParseReportMonth(month, time.Local); err != nil {
		return 0, "", err
	}
	return id, month, nil
}

// report serves the draft PDF at the old address (?month=), as links and
// scripts written before the report page still use it.
func (s *server) report(c echo.Context) error {
	if _, _, err := s.reportMonth(c); halfmark.ErrorCodeOf(err) == halfmark.EInvalid {
		return s.fail(c, http.StatusBadRequest, fmt.Sprintf("The month %q is not like 2026-03; add ?month=YYYY-MM to the address.", c.QueryParam("month")))
	}
	return s.reportDraft(c)
}

func (s *server) reportPageData(c echo.Context, id int64, month string) (reportPage, error) {
	ctx := c.Request().Context()
	d, err := NewReporter(s.d).gather(ctx, id, month)
	if err != nil {
		return reportPage{}, err
	}
	pg := reportPage{Machine: d.M, Month: month, Blockers: d.Blockers, Available: s.d.Reports != nil}
	if s.d.Reports != nil {
		sr, err := s.d.Reports.SignedReport(ctx, id, month)
		switch halfmark.ErrorCodeOf(err) {
		case "":
			pg.Signed = &sr
		case halfmark.ENotFound:
		default:
			return pg, err
		}
	}
	return pg, nil
}

// reportPage shows a month's report: the draft, the signed copy with who
// signed it and when, and the form to sign.
func (s *server) reportPage(c echo.Context) error {
	id, month, err := s.reportMonth(c)
	if err != nil {
		return s.failErr(c, err)
	}
	pg, err := s.reportPageData(c, id, month)
	if err != nil {
		return s.failErr(c, err)
	}
	return s.render(c, http.StatusOK, "report", "Report "+pg.Machine.Name+" "+month, pg)
}

func reportFile(m string, month string, signed bool) string {
	kind := "draft"
	if signed {
		kind = "signed"
	}
	return fmt.Sprintf("halfmark-%s-%s-%s.pdf", safeName(m), month, kind)
}

// reportDraft renders the unsigned draft PDF.
func (s *server) reportDraft(c echo.Context) error {
	id, month, err := s.reportMonth(c)
	if err != nil {
		return s.failErr(c, err)
	}
	dr, err := NewReporter(s.d).RenderReport(c.Request().Context(), id, month)
	if err != nil {
		return s.failErr(c, err)
	}
	m, err := s.d.Machines.Machine(c.Request().Context(), id)
	if err != nil {
		return s.failErr(c, err)
	}
	c.Response().Header().Set("Content-Disposition", `attachment; filename="`+reportFile(m.Name, month, false)+`"`)
	return c.Blob(http.StatusOK, "application/pdf", dr.PDF)
}

// reportSigned sends the signed bytes exactly as stored.
func (s *server) reportSigned(c echo.Context) error {
	id, month, err := s.reportMonth(c)
	if err != nil {
		return s.failErr(c, err)
	}
	if s.d.Reports == nil {
		return s.fail(c, http.StatusServiceUnavailable, "Signed reports are not kept on this server.")
	}
	sr, err := s.d.Reports.SignedReport(c.Request().Context(), id, month)
	if err != nil {
		return s.failErr(c, err)
	}
	m, err := s.d.Machines.Machine(c.Request().Context(), id)
	if err != nil {
		return s.failErr(c, err)
	}
	SignedHeaders(c.Response().Header(), sr)
	c.Response().Header().Set("Content-Disposition", `attachment; filename="`+reportFile(m.Name, month, true)+`"`)
	return c.Blob(http.StatusOK, "application/pdf", sr.PDF)
}

// SignedHeaders names the signer, the time and the SHA-256 of a signed
// report in the response that carries its bytes.
func SignedHeaders(h http.Header, sr halfmark.SignedReport) {
	h.Set("X-Report-SHA256", sr.SHA256)
	h.Set("X-Report-Signed-By", sr.SignedBy)
	h.Set("X-Report-Signed-At", sr.SignedAt.UTC().Format(time.RFC3339))
}

// signReport renders the draft now and signs exactly those bytes; with
// blockers the reason is required.
func (s *server) signReport(c echo.Context) error {
	id, month, err := s.reportMonth(c)
	if err != nil {
		return s.failErr(c, err)
	}
	if s.d.Reports == nil {
		return s.fail(c, http.StatusServiceUnavailable, "Signed reports are not kept on this server.")
	}
	reason := strings.TrimSpace(c.FormValue("reason"))
	if reason == "" {
		reason = strings.TrimSpace(c.FormValue("comment"))
	}
	ctx := c.Request().Context()
	dr, err := NewReporter(s.d).RenderReport(ctx, id, month)
	if err != nil {
		return s.failErr(c, err)
	}
	if _, err = s.d.Reports.SignMonthlyReport(ctx, user(c).Actor(), dr, reason); err != nil {
		if halfmark.ErrorCodeOf(err) != halfmark.EInvalid && halfmark.ErrorCodeOf(err) != halfmark.EConflict {
			return s.failErr(c, err)
		}
		pg, perr := s.reportPageData(c, id, month)
		if perr != nil {
			return s.failErr(c, perr)
		}
		pg.Problem, pg.Reason = err.Error(), reason
		status := http.StatusUnprocessableEntity
		if halfmark.ErrorCodeOf(err) == halfmark.EConflict {
			pg.Problem, status = messageOf(err), http.StatusConflict
		}
		return s.render(c, status, "report", "Report "+pg.Machine.Name+" "+month, pg)
	}
	return c.Redirect(http.StatusSeeOther, fmt.Sprintf("/machines/%d/reports/%s", id, month))
}

func safeName(s string) string {
	return strings.Map(func(r rune) rune {
		if r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z' || r >= '0' && r <= '9' || r == '-' {
			return r
		}
		return '_'
	}, s)
}

func isASCII(s string) bool {
	for i := 0; i < len(s); i++ {
		if s[i] >= 0x80 {
			return false
		}
	}
	return true
}

// plural is "1 point", "3 points".
func plural(n int, what string) string {
	if n == 1 {
		return "1 " + what
	}
	return strconv.Itoa(n) + " " + what + "s"
}

// openedText is when a finding was opened, saying so when that was after
// the month (the fault began earlier; it was seen later).
func openedText(f halfmark.Finding, to time.Time) string {
	t := "opened " + f.OpenedAt.Local().Format("2006-01-02")
	if !f.OpenedAt.Before(to) {
		t += " (after the month)"
	}
	return t
}
