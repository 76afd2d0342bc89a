package web

import (
	"bytes"
	"halfmark"
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
	p.X.Tick.Marker = plot.TimeTicks{Format: "Jan 2"}
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
	p.X.Tick.Marker = plot.TimeTicks{Format: "Jan 2"}
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
