package web

import (
	"math"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"

	"halfmark"
)

func f64(v float64) *float64 { return &v }

// Stacked panels share one time axis: after plot.Align (gonum), a given
// time falls at the same horizontal position in the value panel and in
// the EWMA panel, although their y-axis labels differ in width.
func TestStackedPanelsShareTimeAxis(t *testing.T) {
	t0 := time.Date(2025, 12, 20, 8, 0, 0, 0, time.UTC)
	var ch halfmark.SeriesChart
	ch.Centre, ch.EWMALambda, ch.EWMAL = 50, 0.2, 2.7
	ch.ToleranceLower, ch.ToleranceUpper = f64(48), f64(52)
	for i := range 30 {
		ch.Points = append(ch.Points, halfmark.ChartPoint{Time: t0.AddDate(0, 0, i), ValueMM: 50 + 0.01*float64(i),
			EWMA: f64(0.001234 * float64(i)), EWMAUCL: f64(0.1), EWMALCL: f64(-0.1)})
	}
	v := engineView{Title: "X1 position"}
	plots := []*plot.Plot{enginePlot(ch, v), engineEWMAPlot(ch, v)}
	if plots[1] == nil {
		t.Fatal("no EWMA panel")
	}
	c := vgimg.New(vg.Points(720), vg.Points(470))
	rows := [][]*plot.Plot{{plots[0]}, {plots[1]}}
	cs := plot.Align(rows, draw.Tiles{Rows: 2, Cols: 1, PadY: vg.Points(4)}, draw.New(c))
	for _, when := range []time.Time{t0, t0.AddDate(0, 0, 29), t0.AddDate(0, 0, 11)} {
		var xs []vg.Length
		for i, p := range plots {
			dc := p.DataCanvas(cs[i][0])
			xs = append(xs, dc.X(p.X.Norm(unix(when))))
		}
		if math.Abs(float64(xs[0]-xs[1])) > 0.01 {
			t.Errorf("%s at x = %v in the value panel and %v in the EWMA panel", when.Format("2006-01-02"), xs[0], xs[1])
		}
	}
	// Dates carry the year: the axis spans a new year.
	ticks := plots[0].X.Tick.Marker.Ticks(plots[0].X.Min, plots[0].X.Max)
	var labels []string
	for _, tk := range ticks {
		if tk.Label != "" {
			labels = append(labels, tk.Label)
		}
	}
	joined := strings.Join(labels, " ")
	if !strings.Contains(joined, "2025-12") || !strings.Contains(joined, "2026-01") {
		t.Errorf("tick labels %q lack the year", joined)
	}
	if _, err := seriesChartSVG(ch, "X1 position", []correctedPoint{{t0.AddDate(0, 0, 3), 5}}, nil, nil); err != nil {
		t.Fatal(err)
	}
}

// The engine's drift line is drawn from its stored ends and, on a series
// page, carried on to the projected crossing: the x axis reaches the
// crossing and the y axis the line's value there, FromMM + slope·Δt
// (analytic: 50 mm + 3 mm/30 d × 60 d = 56 mm).
func TestTrendLineReachesTheCrossing(t *testing.T) {
	t0 := time.Date(2026, 1, 5, 8, 0, 0, 0, time.UTC)
	var ch halfmark.SeriesChart
	ch.Centre = 50
	for i := range 30 {
		ch.Points = append(ch.Points, halfmark.ChartPoint{Time: t0.AddDate(0, 0, i), ValueMM: 50 + 0.1*float64(i)})
	}
	cross := t0.AddDate(0, 0, 60)
	tr := &halfmark.SeriesTrend{From: t0, To: t0.AddDate(0, 0, 29), FromMM: 50, ToMM: 52.9, SlopePer30dMM: 3, Significant: true}
	p := enginePlot(ch, engineView{Trend: tr, Crossing: &cross})
	if p.X.Max < unix(cross) {
		t.Errorf("x axis ends at %v, before the crossing %v", p.X.Max, unix(cross))
	}
	if p.Y.Max < 56-1e-9 {
		t.Errorf("y axis ends at %.3f mm, below the line's 56 mm at the crossing", p.Y.Max)
	}
	// A trend that is not significant draws nothing and leaves the axes.
	q := enginePlot(ch, engineView{Trend: &halfmark.SeriesTrend{From: t0, To: t0.AddDate(0, 0, 29), FromMM: 50, SlopePer30dMM: 3}, Crossing: &cross})
	if q.X.Max >= unix(cross) || q.Y.Max >= 56 {
		t.Errorf("a non-significant trend moved the axes to %v, %v", q.X.Max, q.Y.Max)
	}
}
