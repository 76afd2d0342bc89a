package web

import (
	"bytes"
	"html/template"
	"image/color"
	"math"
	"regexp"
	"strconv"
	"strings"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"

	"halfmark"
	"halfmark/analysis/spc"
)

// Chart colours (Okabe–Ito palette, as in the stylesheet) and band fills.
var (
	inkColour     = color.RGBA{29, 35, 43, 255}
	pointColour   = color.RGBA{60, 70, 82, 255}
	signalColour  = color.RGBA{213, 94, 0, 255}   // vermillion
	controlColour = color.RGBA{0, 114, 178, 255}  // blue
	trendColour   = color.RGBA{168, 72, 127, 255} // reddish purple
	tolBand       = color.NRGBA{0, 158, 115, 46}  // bluish green, light (non-premultiplied alpha)
	actionBand    = color.NRGBA{230, 159, 0, 56}  // orange, light
	ewmaColour    = color.RGBA{0, 114, 178, 255}
)

// chartSpec is what a value chart shows. Values are in mm; the bands are
// centre ± tolerance and centre ± action limit; control limits centre ± L·σ (drift.ShewhartL).
type chartSpec struct {
	Title      string
	Times      []time.Time
	Values     []float64
	Signal     []bool
	Centre     float64
	HasCentre  bool
	Tol, Act   float64
	HasLimits  bool
	UCL, LCL   float64
	HasControl bool
	Trend      *halfmark.SeriesTrend
	TrendFrom  time.Time
	TrendTo    time.Time
	Compact    bool
}

func specFor(v seriesView, compact bool, now time.Time) chartSpec {
	sp := chartSpec{Compact: compact, Signal: v.Signal, HasCentre: v.HasCentre, Centre: v.Centre,
		HasLimits: v.HasLimits && v.HasCentre, Tol: v.Limits.ToleranceMM, Act: v.Limits.ActionMM,
		HasControl: v.HasSigma && v.HasCentre, UCL: v.UCL, LCL: v.LCL, Trend: v.Trend}
	sp.Times = make([]time.Time, len(v.Points))
	sp.Values = make([]float64, len(v.Points))
	for i, p := range v.Points {
		sp.Times[i], sp.Values[i] = p.MeasuredAt, p.Value
	}
	if v.Trend != nil && v.Trend.Significant {
		sp.TrendFrom, sp.TrendTo = v.Trend.From, v.Trend.To
		if v.Crossing != nil && v.Crossing.After(sp.TrendTo) {
			sp.TrendTo = *v.Crossing
		}
	}
	return sp
}

// dateTick labels time axes with the year: a chart may span years.
const dateTick = "2006-01-02"

func unix(t time.Time) float64 { return float64(t.Unix()) }

func sansFonts(p *plot.Plot, size vg.Length) {
	for _, ts := range []*draw.TextStyle{&p.Title.TextStyle, &p.X.Label.TextStyle, &p.Y.Label.TextStyle,
		&p.X.Tick.Label, &p.Y.Tick.Label} {
		ts.Font.Variant = "Sans"
		ts.Font.Size = size
	}
	p.Title.TextStyle.Font.Size = size + 1
	p.Legend.TextStyle.Font.Variant = "Sans"
	p.Legend.TextStyle.Font.Size = size
}

// valuePlot draws a control chart of a series: tolerance and action bands,
// baseline, control limits, the values joined by a thin line, signalled
// points as large triangles, and the trend line with its projection.
func valuePlot(sp chartSpec) *plot.Plot {
	p := plot.New()
	fs := vg.Points(9)
	if sp.Compact {
		fs = vg.Points(8)
	}
	sansFonts(p, fs)
	if !sp.Compact {
		p.Title.Text = sp.Title
		p.Y.Label.Text = "mm"
	}
	p.X.Tick.Marker = plot.TimeTicks{Format: dateTick}
	p.BackgroundColor = color.White
	if len(sp.Values) == 0 {
		p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = 0, 1, 0, 1
		return p
	}
	x0, x1 := unix(sp.Times[0]), unix(sp.Times[len(sp.Times)-1])
	if !sp.TrendTo.IsZero() && unix(sp.TrendTo) > x1 {
		x1 = unix(sp.TrendTo)
	}
	if x1 <= x0 {
		x0, x1 = x0-43200, x1+43200
	}
	pad := (x1 - x0) * 0.02
	x0, x1 = x0-pad, x1+pad
	band := func(lo, hi float64, c color.Color) {
		poly, err := plotter.NewPolygon(plotter.XYs{{X: x0, Y: lo}, {X: x1, Y: lo}, {X: x1, Y: hi}, {X: x0, Y: hi}})
		if err == nil {
			poly.Color = c
			poly.LineStyle.Width = 0
			p.Add(poly)
		}
	}
	hline := func(y float64, c color.Color, dashes []vg.Length, w vg.Length) {
		l, err := plotter.NewLine(plotter.XYs{{X: x0, Y: y}, {X: x1, Y: y}})
		if err == nil {
			l.Color, l.Dashes, l.Width = c, dashes, w
			p.Add(l)
		}
	}
	ymin, ymax := math.Inf(1), math.Inf(-1)
	for _, v := range sp.Values {
		ymin, ymax = math.Min(ymin, v), math.Max(ymax, v)
	}
	if sp.HasLimits {
		band(sp.Centre-sp.Act, sp.Centre+sp.Act, actionBand)
		band(sp.Centre-sp.Tol, sp.Centre+sp.Tol, tolBand)
		ymin, ymax = math.Min(ymin, sp.Centre-sp.Act), math.Max(ymax, sp.Centre+sp.Act)
	}
	if sp.HasControl {
		hline(sp.UCL, controlColour, []vg.Length{vg.Points(3), vg.Points(2)}, vg.Points(0.8))
		hline(sp.LCL, controlColour, []vg.Length{vg.Points(3), vg.Points(2)}, vg.Points(0.8))
		ymin, ymax = math.Min(ymin, sp.LCL), math.Max(ymax, sp.UCL)
	}
	if sp.HasCentre {
		hline(sp.Centre, inkColour, nil, vg.Points(1))
	}
	xy := make(plotter.XYs, len(sp.Values))
	var sig plotter.XYs
	for i, v := range sp.Values {
		xy[i] = plotter.XY{X: unix(sp.Times[i]), Y: v}
		if i < len(sp.Signal) && sp.Signal[i] {
			sig = append(sig, xy[i])
		}
	}
	if l, pts, err := plotter.NewLinePoints(xy); err == nil {
		l.Color, l.Width = color.RGBA{150, 158, 168, 255}, vg.Points(0.6)
		pts.Shape = draw.CircleGlyph{}
		pts.Color = pointColour
		pts.Radius = vg.Points(1.6)
		if len(xy) < 40 {
			pts.Radius = vg.Points(2.2)
		}
		p.Add(l, pts)
	}
	if len(sig) > 0 {
		if s, err := plotter.NewScatter(sig); err == nil {
			s.Shape = draw.TriangleGlyph{}
			s.Color = signalColour
			s.Radius = vg.Points(4)
			p.Add(s)
		}
	}
	if tr := sp.Trend; tr != nil && !sp.TrendFrom.IsZero() {
		a, b := sp.TrendFrom, sp.TrendTo
		perDay := tr.SlopePer30dMM / 30
		ya, yb := tr.FromMM, tr.FromMM+perDay*b.Sub(a).Hours()/24
		if l, err := plotter.NewLine(plotter.XYs{{X: unix(a), Y: ya}, {X: unix(b), Y: yb}}); err == nil {
			l.Color, l.Width, l.Dashes = trendColour, vg.Points(1.2), []vg.Length{vg.Points(1), vg.Points(2)}
			p.Add(l)
		}
		ymin, ymax = math.Min(ymin, math.Min(ya, yb)), math.Max(ymax, math.Max(ya, yb))
	}
	ypad := (ymax - ymin) * 0.08
	if ypad == 0 {
		ypad = 0.1
	}
	p.X.Min, p.X.Max = x0, x1
	p.Y.Min, p.Y.Max = ymin-ypad, ymax+ypad
	return p
}

// ewmaPlot draws the EWMA statistic with its limits below a value chart.
func ewmaPlot(times []time.Time, r *spc.EWMAResult, target float64) *plot.Plot {
	p := plot.New()
	sansFonts(p, vg.Points(9))
	p.Title.Text = "EWMA (λ = " + trimFloat(r.Lambda) + ", L = " + trimFloat(r.L) + ")"
	p.Y.Label.Text = "mm"
	p.X.Tick.Marker = plot.TimeTicks{Format: dateTick}
	n := len(r.Z)
	if n == 0 || len(times) < n {
		return p
	}
	t := times[len(times)-n:]
	z, up, lo := make(plotter.XYs, n), make(plotter.XYs, n), make(plotter.XYs, n)
	var sig plotter.XYs
	for i := 0; i < n; i++ {
		x := unix(t[i])
		z[i], up[i], lo[i] = plotter.XY{X: x, Y: r.Z[i]}, plotter.XY{X: x, Y: r.UCL[i]}, plotter.XY{X: x, Y: r.LCL[i]}
		if r.Signal[i] {
			sig = append(sig, z[i])
		}
	}
	for _, lim := range []plotter.XYs{up, lo} {
		if l, err := plotter.NewLine(lim); err == nil {
			l.Color, l.Dashes, l.Width = controlColour, []vg.Length{vg.Points(3), vg.Points(2)}, vg.Points(0.8)
			p.Add(l)
		}
	}
	if l, err := plotter.NewLine(plotter.XYs{{X: z[0].X, Y: target}, {X: z[n-1].X, Y: target}}); err == nil {
		l.Color, l.Width = inkColour, vg.Points(1)
		p.Add(l)
	}
	if l, pts, err := plotter.NewLinePoints(z); err == nil {
		l.Color, l.Width = ewmaColour, vg.Points(1)
		pts.Shape, pts.Color, pts.Radius = draw.CircleGlyph{}, ewmaColour, vg.Points(1.6)
		p.Add(l, pts)
	}
	if len(sig) > 0 {
		if s, err := plotter.NewScatter(sig); err == nil {
			s.Shape, s.Color, s.Radius = draw.TriangleGlyph{}, signalColour, vg.Points(4)
			p.Add(s)
		}
	}
	return p
}

func trimFloat(v float64) string {
	s := strings.TrimRight(strings.TrimRight(strconvF(v), "0"), ".")
	if s == "" {
		return "0"
	}
	return s
}

// svgStyle matches the style attributes vgsvg writes.
var svgStyle = regexp.MustCompile(`style="([^"]*)"`)

// inlineSVG renders p as an SVG element for embedding in a page. vgsvg
// writes style="…" attributes, which a CSP without 'unsafe-inline' for
// styles would ignore; they are rewritten as the equivalent SVG
// presentation attributes (fill="…", stroke="…"), which CSP allows.
func inlineSVG(p *plot.Plot, w, h vg.Length, label string) (template.HTML, error) {
	c := vgsvg.New(w, h)
	p.Draw(draw.New(c))
	return svgElement(c, label)
}

// svgElement turns a drawn SVG canvas into an element for a page.
func svgElement(c *vgsvg.Canvas, label string) (template.HTML, error) {
	var buf bytes.Buffer
	if _, err := c.WriteTo(&buf); err != nil {
		return "", err
	}
	s := buf.String()
	if i := strings.Index(s, "<svg"); i >= 0 {
		s = s[i:]
	}
	if i := strings.Index(s, "viewBox="); i > 0 {
		s = `<svg class="chart" role="img" aria-label="` + template.HTMLEscapeString(label) + `" ` + s[i:]
	}
	s = svgStyle.ReplaceAllStringFunc(s, func(m string) string {
		body := m[len(`style="`) : len(m)-1]
		var b strings.Builder
		for _, decl := range strings.Split(body, ";") {
			k, v, ok := strings.Cut(decl, ":")
			k, v = strings.TrimSpace(k), strings.TrimSpace(v)
			if !ok || k == "" || strings.ContainsAny(k+v, `"<>`) {
				continue
			}
			if b.Len() > 0 {
				b.WriteByte(' ')
			}
			b.WriteString(k + `="` + v + `"`)
		}
		return b.String()
	})
	return template.HTML(s), nil
}

// pngChart renders p as a PNG at 150 dpi for the PDF report.
func pngChart(p *plot.Plot, w, h vg.Length) ([]byte, error) {
	c := vgimg.PngCanvas{Canvas: vgimg.NewWith(vgimg.UseWH(w, h), vgimg.UseDPI(150))}
	p.Draw(draw.New(c))
	var buf bytes.Buffer
	if _, err := c.WriteTo(&buf); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

func strconvF(v float64) string { return strconv.FormatFloat(v, 'f', 3, 64) }

// correctedPoint is a value that a later check superseded: drawn as a
// hollow mark beside its correction, never joined to the series line.
type correctedPoint struct {
	Time    time.Time
	ValueMM float64
}

// engineView selects what an engine chart shows: the points measured in
// [From, To) (zero: all) and the x range, so that panels stacked or set
// side by side share one time axis.
type engineView struct {
	Title     string
	From, To  time.Time
	Compact   bool
	Corrected []correctedPoint
	// Trend is the engine's drift line (drawn when significant); Crossing,
	// when set and the view is not a fixed window, extends it to the
	// projected tolerance crossing.
	Trend    *halfmark.SeriesTrend
	Crossing *time.Time
}

// chartRange is the x range of an engine chart: the view's window, or the
// points' span padded by 2%.
func chartRange(ch halfmark.SeriesChart, v engineView) (float64, float64) {
	if !v.From.IsZero() && !v.To.IsZero() {
		return unix(v.From), unix(v.To)
	}
	x0, x1 := math.Inf(1), math.Inf(-1)
	for _, p := range ch.Points {
		x0, x1 = math.Min(x0, unix(p.Time)), math.Max(x1, unix(p.Time))
	}
	for _, p := range v.Corrected {
		x0, x1 = math.Min(x0, unix(p.Time)), math.Max(x1, unix(p.Time))
	}
	if math.IsInf(x0, 0) {
		now := unix(time.Now())
		return now - 86400, now
	}
	if x1 <= x0 {
		x0, x1 = x0-43200, x1+43200
	}
	pad := (x1 - x0) * 0.02
	return x0 - pad, x1 + pad
}

func inView(t time.Time, v engineView) bool {
	return (v.From.IsZero() || !t.Before(v.From)) && (v.To.IsZero() || t.Before(v.To))
}

// enginePlot draws a series as the drift engine judged it: the tolerance
// and action bands and control limits the engine stored (absolute mm),
// its centre, the values, the points on which a rule fired (triangles)
// and superseded values (hollow squares).
func enginePlot(ch halfmark.SeriesChart, v engineView) *plot.Plot {
	p := plot.New()
	fs := vg.Points(9)
	if v.Compact {
		fs = vg.Points(7)
	}
	sansFonts(p, fs)
	p.Title.Text = v.Title
	p.Y.Label.Text = "mm"
	p.X.Tick.Marker = plot.TimeTicks{Format: dateTick}
	p.BackgroundColor = color.White
	x0, x1 := chartRange(ch, v)
	trendTo := time.Time{}
	if tr := v.Trend; tr != nil && tr.Significant {
		trendTo = tr.To
		if v.Crossing != nil && v.From.IsZero() && v.Crossing.After(trendTo) {
			trendTo = *v.Crossing
			x1 = math.Max(x1, unix(trendTo))
		}
	}
	band := func(lo, hi *float64, c color.Color) {
		if lo == nil || hi == nil {
			return
		}
		poly, err := plotter.NewPolygon(plotter.XYs{{X: x0, Y: *lo}, {X: x1, Y: *lo}, {X: x1, Y: *hi}, {X: x0, Y: *hi}})
		if err == nil {
			poly.Color = c
			poly.LineStyle.Width = 0
			p.Add(poly)
		}
	}
	ymin, ymax := math.Inf(1), math.Inf(-1)
	grow := func(ps ...*float64) {
		for _, y := range ps {
			if y != nil {
				ymin, ymax = math.Min(ymin, *y), math.Max(ymax, *y)
			}
		}
	}
	hline := func(y *float64, c color.Color, dashes []vg.Length, w vg.Length) {
		if y == nil {
			return
		}
		l, err := plotter.NewLine(plotter.XYs{{X: x0, Y: *y}, {X: x1, Y: *y}})
		if err == nil {
			l.Color, l.Dashes, l.Width = c, dashes, w
			p.Add(l)
		}
	}
	band(ch.ActionLower, ch.ActionUpper, actionBand)
	band(ch.ToleranceLower, ch.ToleranceUpper, tolBand)
	grow(ch.ActionLower, ch.ActionUpper, ch.ToleranceLower, ch.ToleranceUpper)
	dash := []vg.Length{vg.Points(3), vg.Points(2)}
	hline(ch.UCL, controlColour, dash, vg.Points(0.8))
	hline(ch.LCL, controlColour, dash, vg.Points(0.8))
	grow(ch.UCL, ch.LCL)
	centre := ch.Centre
	if len(ch.Points) > 0 {
		hline(&centre, inkColour, nil, vg.Points(1))
		grow(&centre)
	}
	if tr := v.Trend; !trendTo.IsZero() {
		// The line the engine fitted, y = FromMM + slope·(t − From),
		// clipped to the chart's x range.
		perSec := tr.SlopePer30dMM / 30 / 86400
		a, b := math.Max(unix(tr.From), x0), math.Min(unix(trendTo), x1)
		if b > a {
			ya, yb := tr.FromMM+perSec*(a-unix(tr.From)), tr.FromMM+perSec*(b-unix(tr.From))
			if l, err := plotter.NewLine(plotter.XYs{{X: a, Y: ya}, {X: b, Y: yb}}); err == nil {
				l.Color, l.Width, l.Dashes = trendColour, vg.Points(1.2), []vg.Length{vg.Points(1), vg.Points(2)}
				p.Add(l)
				grow(&ya, &yb)
			}
		}
	}
	var xy, sig plotter.XYs
	for _, pt := range ch.Points {
		if !inView(pt.Time, v) {
			continue
		}
		q := plotter.XY{X: unix(pt.Time), Y: pt.ValueMM}
		xy = append(xy, q)
		if len(pt.Signals) > 0 {
			sig = append(sig, q)
		}
		ymin, ymax = math.Min(ymin, q.Y), math.Max(ymax, q.Y)
	}
	if len(xy) > 0 {
		if l, pts, err := plotter.NewLinePoints(xy); err == nil {
			l.Color, l.Width = color.RGBA{150, 158, 168, 255}, vg.Points(0.6)
			pts.Shape, pts.Color, pts.Radius = draw.CircleGlyph{}, pointColour, vg.Points(1.6)
			if len(xy) < 40 {
				pts.Radius = vg.Points(2.2)
			}
			p.Add(l, pts)
		}
	}
	if len(sig) > 0 {
		if s, err := plotter.NewScatter(sig); err == nil {
			s.Shape, s.Color, s.Radius = draw.TriangleGlyph{}, signalColour, vg.Points(4)
			p.Add(s)
		}
	}
	var cor plotter.XYs
	for _, c := range v.Corrected {
		if inView(c.Time, v) {
			cor = append(cor, plotter.XY{X: unix(c.Time), Y: c.ValueMM})
			ymin, ymax = math.Min(ymin, c.ValueMM), math.Max(ymax, c.ValueMM)
		}
	}
	if len(cor) > 0 {
		if s, err := plotter.NewScatter(cor); err == nil {
			s.Shape, s.Color, s.Radius = draw.BoxGlyph{}, color.RGBA{150, 158, 168, 255}, vg.Points(3)
			s.GlyphStyle.Shape = draw.BoxGlyph{}
			p.Add(s)
			p.Legend.Add("corrected (superseded)", s)
			p.Legend.Top = true
		}
	}
	if math.IsInf(ymin, 0) {
		ymin, ymax = -1, 1
	}
	ypad := (ymax - ymin) * 0.08
	if ypad == 0 {
		ypad = 0.1
	}
	p.X.Min, p.X.Max = x0, x1
	p.Y.Min, p.Y.Max = ymin-ypad, ymax+ypad
	return p
}

// engineEWMAPlot draws the engine's EWMA statistic with its limits over
// the same x range as enginePlot; nil when the engine stored no EWMA.
func engineEWMAPlot(ch halfmark.SeriesChart, v engineView) *plot.Plot {
	var z, up, lo, sig plotter.XYs
	for _, pt := range ch.Points {
		if pt.EWMA == nil || !inView(pt.Time, v) {
			continue
		}
		x := unix(pt.Time)
		z = append(z, plotter.XY{X: x, Y: *pt.EWMA})
		if pt.EWMAUCL != nil && pt.EWMALCL != nil {
			up, lo = append(up, plotter.XY{X: x, Y: *pt.EWMAUCL}), append(lo, plotter.XY{X: x, Y: *pt.EWMALCL})
			if *pt.EWMA > *pt.EWMAUCL || *pt.EWMA < *pt.EWMALCL {
				sig = append(sig, z[len(z)-1])
			}
		}
	}
	if len(z) == 0 {
		return nil
	}
	p := plot.New()
	sansFonts(p, vg.Points(9))
	p.Title.Text = "EWMA (λ = " + trimFloat(ch.EWMALambda) + ", L = " + trimFloat(ch.EWMAL) + ")"
	p.Y.Label.Text = "mm"
	p.X.Tick.Marker = plot.TimeTicks{Format: dateTick}
	p.BackgroundColor = color.White
	for _, lim := range []plotter.XYs{up, lo} {
		if len(lim) > 0 {
			if l, err := plotter.NewLine(lim); err == nil {
				l.Color, l.Dashes, l.Width = controlColour, []vg.Length{vg.Points(3), vg.Points(2)}, vg.Points(0.8)
				p.Add(l)
			}
		}
	}
	if l, pts, err := plotter.NewLinePoints(z); err == nil {
		l.Color, l.Width = ewmaColour, vg.Points(1)
		pts.Shape, pts.Color, pts.Radius = draw.CircleGlyph{}, ewmaColour, vg.Points(1.6)
		p.Add(l, pts)
	}
	if len(sig) > 0 {
		if s, err := plotter.NewScatter(sig); err == nil {
			s.Shape, s.Color, s.Radius = draw.TriangleGlyph{}, signalColour, vg.Points(4)
			p.Add(s)
		}
	}
	p.X.Min, p.X.Max = chartRange(ch, v)
	return p
}

// stackedSVG draws plots one above the other, aligned so that they share
// one time axis: the same x range (set by the caller) and the same
// plotting-area left and right edges (plot.Align pads every panel to the
// widest y-axis labels); the panels share h equally.
func stackedSVG(plots []*plot.Plot, w, h vg.Length, label string) (template.HTML, error) {
	c := vgsvg.New(w, h)
	drawStacked(plots, draw.New(c))
	return svgElement(c, label)
}

func drawStacked(plots []*plot.Plot, dc draw.Canvas) {
	rows := make([][]*plot.Plot, len(plots))
	for i, p := range plots {
		rows[i] = []*plot.Plot{p}
	}
	tiles := draw.Tiles{Rows: len(plots), Cols: 1, PadY: vg.Points(4)}
	cs := plot.Align(rows, tiles, dc)
	for i, p := range plots {
		p.Draw(cs[i][0])
	}
}

// leafPlot draws one MLC bank in one image: each leaf end's deviation from
// its baseline (mm, the leaf error) against its leaf pair, with the
// tolerance band; signalled leaves as triangles.
func leafPlot(title, ylabel string, pairs []int, devs []float64, signal []bool, tol *float64) *plot.Plot {
	p := plot.New()
	sansFonts(p, vg.Points(8))
	p.Title.Text = title
	p.X.Label.Text = "leaf pair"
	p.Y.Label.Text = ylabel
	p.BackgroundColor = color.White
	x0, x1 := 0.0, 1.0
	for i, n := range pairs {
		if i == 0 || float64(n) < x0 {
			x0 = float64(n)
		}
		if i == 0 || float64(n) > x1 {
			x1 = float64(n)
		}
	}
	x0, x1 = x0-1, x1+1
	ymin, ymax := math.Inf(1), math.Inf(-1)
	if tol != nil {
		t := *tol
		if poly, err := plotter.NewPolygon(plotter.XYs{{X: x0, Y: -t}, {X: x1, Y: -t}, {X: x1, Y: t}, {X: x0, Y: t}}); err == nil {
			poly.Color, poly.LineStyle.Width = tolBand, 0
			p.Add(poly)
		}
		ymin, ymax = math.Min(ymin, -t), math.Max(ymax, t)
	}
	if tol != nil { // a deviation chart: zero is the baseline
		if l, err := plotter.NewLine(plotter.XYs{{X: x0, Y: 0}, {X: x1, Y: 0}}); err == nil {
			l.Color, l.Width = inkColour, vg.Points(0.8)
			p.Add(l)
		}
		ymin, ymax = math.Min(ymin, -0.5), math.Max(ymax, 0.5)
	}
	var xy, sig plotter.XYs
	for i, n := range pairs {
		q := plotter.XY{X: float64(n), Y: devs[i]}
		xy = append(xy, q)
		if signal[i] {
			sig = append(sig, q)
		}
		ymin, ymax = math.Min(ymin, q.Y), math.Max(ymax, q.Y)
	}
	if len(xy) > 0 {
		if s, err := plotter.NewScatter(xy); err == nil {
			s.Shape, s.Color, s.Radius = draw.CircleGlyph{}, pointColour, vg.Points(1.8)
			p.Add(s)
		}
	}
	if len(sig) > 0 {
		if s, err := plotter.NewScatter(sig); err == nil {
			s.Shape, s.Color, s.Radius = draw.TriangleGlyph{}, signalColour, vg.Points(4)
			p.Add(s)
		}
	}
	if math.IsInf(ymin, 0) {
		ymin, ymax = -0.5, 0.5
	}
	pad := (ymax - ymin) * 0.08
	if pad == 0 {
		pad = 0.1
	}
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = x0, x1, ymin-pad, ymax+pad
	return p
}

// plainNumbers rewrites "|−45.01|" as "−45.01" in an engine message: the
// sign carries the direction and a reader should not have to decode
// absolute-value bars.
func plainNumbers(s string) string {
	return absBars.ReplaceAllStringFunc(s, func(m string) string {
		return strings.Replace(m[1:len(m)-1], "-", "−", 1)
	})
}

var absBars = regexp.MustCompile(`\|[−+-]?[0-9]+(?:\.[0-9]+)?\|`)

// seriesChartSVG draws a series page's chart from the engine's stored
// chart: the value panel and, when the engine stored EWMA statistics, the
// EWMA panel below it on the same time axis (one SVG, panels aligned by
// plot.Align). Superseded values are drawn as corrected.
func seriesChartSVG(ch halfmark.SeriesChart, title string, corrected []correctedPoint, trend *halfmark.SeriesTrend, crossing *time.Time) (template.HTML, error) {
	v := engineView{Title: title, Corrected: corrected, Trend: trend, Crossing: crossing}
	plots := []*plot.Plot{enginePlot(ch, v)}
	h := vg.Points(300)
	if e := engineEWMAPlot(ch, v); e != nil {
		plots = append(plots, e)
		h = vg.Points(470)
	}
	return stackedSVG(plots, vg.Points(720), h, title)
}
