package main

import (
	"context"
	"encoding/json"
	"fmt"
	"net/http"
	"slices"
	"strings"
	"testing"
	"time"

	"halfmark"
	"halfmark/db"
)

// BenchmarkCheckToLevelVisible measures how long after the 201 of a check
// that changes a machine's level the new level is visible in
// GET /api/v1/status, over 50 machines (one check each: X1 4 mm out,
// beyond the shipped 3 mm action limit, so Level 3), with the worker in
// `serve` and in the separate-process topology (1 api + 1 worker). The
// scheduled evaluation runs only every 10 minutes here: what is measured is
// the evaluation on write (PostgreSQL LISTEN/NOTIFY). Reported: p50-ms and
// p99-ms. Run with -benchtime=1x.
func BenchmarkCheckToLevelVisible(b *testing.B) {
	for _, topo := range []string{"serve", "api+worker"} {
		b.Run(topo, func(b *testing.B) {
			for b.Loop() {
				lat := checkToLevel(b, topo, 50)
				slices.Sort(lat)
				q := func(p float64) float64 { return float64(lat[int(p*float64(len(lat)-1))].Microseconds()) / 1000 }
				b.ReportMetric(q(0.5), "p50-ms")
				b.ReportMetric(q(0.99), "p99-ms")
				b.ReportMetric(float64(len(lat)), "checks")
			}
		})
	}
}

func checkToLevel(b *testing.B, topo string, machines int) []time.Duration {
	b.Helper()
	ctx := context.Background()
	url, d := migratedStore(b)
	a := halfmark.CLIActor("latency")
	f := func(v float64) *float64 { return &v }
	start := time.Now().AddDate(0, 0, -25)
	type target struct{ machine, beam int64 }
	var ts []target
	for m := 0; m < machines; m++ {
		mc := halfmark.Machine{Name: fmt.Sprintf("Linac Sill %02d", m+1), SADcm: 100}
		if err := d.CreateMachine(ctx, a, &mc); err != nil {
			b.Fatal(err)
		}
		bm := halfmark.Beam{MachineID: mc.ID, EnergyMV: 6}
		if err := d.CreateBeam(ctx, a, &bm); err != nil {
			b.Fatal(err)
		}
		ts = append(ts, target{mc.ID, bm.ID})
		var cs []halfmark.Check
		for i := 0; i < 20; i++ {
			w := 0.05 * float64((i*7+m)%5-2)
			cs = append(cs, halfmark.Check{MachineID: mc.ID, BeamID: bm.ID, Kind: halfmark.KindMorning, MeasuredAt: start.AddDate(0, 0, i),
				Setup: halfmark.Setup{FieldXcm: f(10), FieldYcm: f(10)},
				Edges: []halfmark.EdgeResult{{Edge: "X1", PositionMM: 50 + w}, {Edge: "X2", PositionMM: 50 - w}, {Edge: "Y1", PositionMM: 50}, {Edge: "Y2", PositionMM: 50 + w}}})
		}
		if _, err := d.RecordBatch(ctx, a, cs); err != nil {
			b.Fatal(err)
		}
	}
	_, tok, err := d.CreateToken(ctx, a, "latency", halfmark.RoleTherapist)
	if err != nil {
		b.Fatal(err)
	}
	bin := buildBinary(b)
	env := []string{"HALFMARK_DATABASE_URL=" + url}
	var addr string
	if topo == "serve" {
		addr = startListening(b, bin, env, "serve", "--evaluate-every", "10m")
	} else {
		addr = startListening(b, bin, env, "api")
		startProc(b, bin, env, "worker", "--evaluate-every", "10m")
	}
	// Every machine evaluated once before the clock starts (as by the
	// nightly job): the listener serves only new checks.
	waitEvaluated(b, d, url)
	status := func() map[int64]halfmark.Level {
		req, _ := http.NewRequest(http.MethodGet, "http://"+addr+"/api/v1/status", nil)
		req.Header.Set("Authorization", "Bearer "+tok)
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			b.Fatal(err)
		}
		defer resp.Body.Close()
		var st struct {
			Machines []halfmark.MachineStatus `json:"machines"`
		}
		if err := json.NewDecoder(resp.Body).Decode(&st); err != nil {
			b.Fatal(err)
		}
		out := map[int64]halfmark.Level{}
		for _, m := range st.Machines {
			out[m.ID] = m.Level
		}
		return out
	}
	var lat []time.Duration
	for i, tg := range ts {
		if lv := status()[tg.machine]; lv != halfmark.LevelInControl {
			b.Fatalf("machine %d at level %d before its check", tg.machine, lv)
		}
		body := fmt.Sprintf(`{"machine_id":%d,"beam_id":%d,"kind":"morning","measured_at":%q,"setup":{"field_x_cm":10,"field_y_cm":10},
			"edges":[{"edge":"X1","position_mm":54},{"edge":"X2","position_mm":50},{"edge":"Y1","position_mm":50},{"edge":"Y2","position_mm":50}]}`,
			tg.machine, tg.beam, time.Now().Add(-time.Duration(machines-i)*time.Second).UTC().Format(time.RFC3339))
		req, _ := http.NewRequest(http.MethodPost, "http://"+addr+"/api/v1/checks", strings.NewReader(body))
		req.Header.Set("Authorization", "Bearer "+tok)
		req.Header.Set("Content-Type", "application/json")
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			b.Fatal(err)
		}
		resp.Body.Close()
		if resp.StatusCode != http.StatusCreated {
			b.Fatalf("check: %d", resp.StatusCode)
		}
		t0 := time.Now()
		for status()[tg.machine] != halfmark.LevelImmediate {
			if time.Since(t0) > 2*time.Minute {
				b.Fatalf("machine %d: level not visible after 2 minutes", tg.machine)
			}
			time.Sleep(5 * time.Millisecond)
		}
		lat = append(lat, time.Since(t0))
	}
	return lat
}

// waitEvaluated runs one full evaluation of the seeded store (as the
// nightly job would) in a separate process and waits for it.
func waitEvaluated(b *testing.B, d *db.DB, url string) {
	b.Helper()
	code, out, stderr := runCLI(b, url, "worker", "--once")
	if code != 0 {
		b.Fatalf("worker --once: %d\n%s\n%s", code, out, stderr)
	}
	ids, err := d.MachinesToEvaluate(context.Background(), true)
	if err != nil || len(ids) != 0 {
		b.Fatalf("%d machines still to evaluate (%v)", len(ids), err)
	}
}
