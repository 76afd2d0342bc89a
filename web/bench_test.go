package web_test

import (
	"context"
	"fmt"
	"io"
	"net/http"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"halfmark"
)

// seedFleet stores 50 machines × 4 beams × 6 edges (four jaws and two MLC
// leaf ends) with 60 daily morning checks each, and returns front-page
// rows that a status service would give for them.
func seedFleet(b *testing.B, h *harness) []halfmark.MachineStatus { return seedFleetN(b, h, 60) }

func seedFleetN(b *testing.B, h *harness, days int) []halfmark.MachineStatus {
	ten := 10.0
	var rows []halfmark.MachineStatus
	start := time.Now().Add(-61 * 24 * time.Hour)
	for m := 0; m < 50; m++ {
		mid, bids := h.machine(fmt.Sprintf("Linac %02d", m), 4, 6, 10, 15)
		var cs []halfmark.Check
		for _, bid := range bids {
			for d := 0; d < days; d++ {
				wob := 0.05 * float64((d*7+m)%5-2)
				cs = append(cs, halfmark.Check{MachineID: mid, BeamID: bid, Kind: halfmark.KindMorning, MeasuredAt: start.Add(time.Duration(d) * 24 * time.Hour),
					Setup: halfmark.Setup{FieldXcm: &ten, FieldYcm: &ten},
					Edges: []halfmark.EdgeResult{{Edge: "X1", PositionMM: 50 + wob}, {Edge: "X2", PositionMM: 50 - wob}, {Edge: "Y1", PositionMM: 50},
						{Edge: "Y2", PositionMM: 50 + wob}, {Edge: "B1P30", PositionMM: 40 + wob}, {Edge: "B2P30", PositionMM: 40 - wob}}})
			}
		}
		if _, err := h.db.RecordBatch(h.ctx, halfmark.CLIActor("seed"), cs); err != nil {
			b.Fatal(err)
		}
		dev, tol, act := 0.3*float64(m%8), 2.0, 3.0
		last := start.Add(59 * 24 * time.Hour)
		rows = append(rows, halfmark.MachineStatus{ID: mid, Name: fmt.Sprintf("Linac %02d", m), Level: halfmark.Level(m % 4), Overdue: m%5 == 0,
			OpenAlerts: m % 3, LastCheckAt: &last, Worst: &halfmark.WorstSeries{SeriesID: int64(m + 1), BeamID: bids[0], BeamLabel: "6 MV",
				Edge: "X2", Quantity: halfmark.QPosition, Geometry: "10×10 cm, iso", DeviationMM: &dev, ToleranceMM: &tol, ActionMM: &act, Rule: "EWMA"}})
	}
	return rows
}

// throughput runs GETs of path from `workers` goroutines for d and
// returns requests per second; every answer must be 200.
func throughput(b *testing.B, c *client, path string, workers int, d time.Duration) float64 {
	var n atomic.Int64
	var failed atomic.Int64
	ctx, cancel := context.WithTimeout(context.Background(), d)
	defer cancel()
	var wg sync.WaitGroup
	t0 := time.Now()
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for ctx.Err() == nil {
				resp, err := c.c.Get(c.h.srv.URL + path)
				if err != nil {
					failed.Add(1)
					continue
				}
				_, _ = io.Copy(io.Discard, resp.Body)
				resp.Body.Close()
				if resp.StatusCode != http.StatusOK {
					failed.Add(1)
					continue
				}
				n.Add(1)
			}
		}()
	}
	wg.Wait()
	if failed.Load() > 0 {
		b.Fatalf("%s: %d failed requests", path, failed.Load())
	}
	return float64(n.Load()) / time.Since(t0).Seconds()
}

// BenchmarkFrontPageVsStatic measures the signed-in front page (session
// lookup, the drift engine's status and findings of the seeded 50-machine
// fleet after one real evaluation, template) against a static file of the
// same server, in the same run. The page caches the status for 5 s, so the
// status query itself is measured beside it (status-query-ms: db.Status and
// the active findings, uncached). Run with -benchtime=1x: one run takes 6 s.
func BenchmarkFrontPageVsStatic(b *testing.B) {
	h := newHarness(b, harnessOpts{engine: true})
	seedFleet(b, h)
	h.evaluate()
	c := h.signIn("therapist@example.org")
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		compare(b, c)
		t := time.Now()
		const n = 20
		for k := 0; k < n; k++ {
			rows, err := h.db.Status(h.ctx)
			if err != nil || len(rows) != 50 {
				b.Fatalf("status: %d machines, %v", len(rows), err)
			}
			if _, err := h.db.Findings(h.ctx, halfmark.FindingFilter{State: "active"}); err != nil {
				b.Fatal(err)
			}
		}
		b.ReportMetric(float64(time.Since(t).Milliseconds())/n, "status-query-ms")
	}
}

// compare alternates one-second runs of the static file and the front
// page, three of each, so that load from other processes on the machine
// falls on both alike, and reports the mean rates and their ratio.
func compare(b *testing.B, c *client) {
	var static, front float64
	for r := 0; r < 3; r++ {
		static += throughput(b, c, "/static/halfmark.css", 4, time.Second)
		front += throughput(b, c, "/", 4, time.Second)
	}
	b.ReportMetric(static/3, "static-req/s")
	b.ReportMetric(front/3, "front-req/s")
	b.ReportMetric(front/static, "front/static")
}
