package main

import (
	"context"
	"syscall"
	"testing"
	"time"

	"halfmark"
)

// A worker killed with SIGKILL in the middle of an evaluation run: the next
// worker completes the evaluation, every signal has one alert, and every
// Level 3 alert sends exactly one e-mail — none lost, none doubled.
func TestWorkerKilledMidEvaluation(t *testing.T) {
	if testing.Short() {
		t.Skip("kill test skipped in -short mode")
	}
	ctx := context.Background()
	url, d := migratedStore(t)
	a := halfmark.CLIActor("kill-test")
	m := halfmark.Machine{Name: "Linac Brume", SADcm: 100}
	if err := d.CreateMachine(ctx, a, &m); err != nil {
		t.Fatal(err)
	}
	b := halfmark.Beam{MachineID: m.ID, EnergyMV: 6}
	if err := d.CreateBeam(ctx, a, &b); err != nil {
		t.Fatal(err)
	}
	// 72 gantry angles × 4 jaws × (position, penumbra) = 576 series of 120
	// points; the X1 edge of every sixth angle steps 3.5 mm on its last
	// point (Level 3 with the shipped book: action limit 3 mm).
	f := func(v float64) *float64 { return &v }
	start := time.Now().AddDate(0, 0, -200)
	var cs []halfmark.Check
	stepped := 0
	for g := 0; g < 72; g++ {
		for i := 0; i < 120; i++ {
			c := halfmark.Check{MachineID: m.ID, BeamID: b.ID, Kind: halfmark.KindMonthly, MeasuredAt: start.Add(time.Duration(i*24+g) * time.Hour),
				Setup: halfmark.Setup{FieldXcm: f(10), FieldYcm: f(10), GantryDeg: f(float64(g * 5))}}
			for j, e := range []string{"X1", "X2", "Y1", "Y2"} {
				pos := 50 + 0.1*float64((i*7+j*3+g)%5-2)
				if e == "X1" && g%6 == 0 && i == 119 {
					pos += 3.5
					stepped++
				}
				c.Edges = append(c.Edges, halfmark.EdgeResult{Edge: e, PositionMM: pos, PenumbraMM: f(3.2 + 0.02*float64(i%3))})
			}
			cs = append(cs, c)
		}
	}
	for i := 0; i < len(cs); i += 2000 {
		if _, err := d.RecordBatch(ctx, a, cs[i:min(i+2000, len(cs))]); err != nil {
			t.Fatal(err)
		}
	}
	ss, err := d.MachineSeries(ctx, m.ID)
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range ss {
		if s.Quantity != halfmark.QPosition {
			continue
		}
		v, sd := 50.0, 0.1
		if err := d.SetBaseline(ctx, a, &halfmark.Baseline{SeriesID: s.ID, ValueMM: &v, SigmaMM: &sd, ValidFrom: start.Add(-time.Hour), Reason: "commissioning"}); err != nil {
			t.Fatal(err)
		}
	}

	box, port := startMailbox(t)
	env := []string{"HALFMARK_DATABASE_URL=" + url, "HALFMARK_SMTP_HOST=127.0.0.1", "HALFMARK_SMTP_PORT=" + port,
		"HALFMARK_SMTP_TLS=none", "HALFMARK_SMTP_FROM=halfmark@brume.example", "HALFMARK_NOTIFY_LEVEL3=chief@brume.example"}
	bin := buildBinary(t)

	// Small transactions make the run long enough to be caught in the middle.
	first := startProc(t, bin, env, "worker", "--evaluate-every", "1s", "--deliver-every", "1s", "--eval-batch", "4")
	killed := false
	for deadline := time.Now().Add(60 * time.Second); time.Now().Before(deadline); time.Sleep(5 * time.Millisecond) {
		var running, evaluated int
		_ = d.Pool.QueryRow(ctx, `SELECT count(*) FILTER (WHERE finished_at IS NULL AND job = 'evaluate-incremental'),
			(SELECT count(*) FROM evaluations) FROM job_runs`).Scan(&running, &evaluated)
		if running > 0 && evaluated > 0 && evaluated < len(ss) {
			_ = first.Process.Signal(syscall.SIGKILL)
			killed = true
			break
		}
	}
	if !killed {
		t.Fatal("could not catch the worker in the middle of an evaluation")
	}
	_ = first.Wait()
	var before int
	_ = d.Pool.QueryRow(ctx, `SELECT count(DISTINCT series_id) FROM evaluations`).Scan(&before)
	t.Logf("killed after %d of %d series were evaluated", before, len(ss))
	if before >= len(ss) {
		t.Fatal("the run had finished when it was killed")
	}

	startProc(t, bin, env, "worker", "--evaluate-every", "1s", "--deliver-every", "1s")
	for deadline := time.Now().Add(90 * time.Second); time.Now().Before(deadline); time.Sleep(200 * time.Millisecond) {
		var done int
		_ = d.Pool.QueryRow(ctx, `SELECT count(*) FROM series_state`).Scan(&done)
		if done == len(ss) && box.count("Level 3") >= stepped {
			break
		}
	}
	time.Sleep(3 * time.Second) // a few more slots: nothing may be sent twice
	var done int
	_ = d.Pool.QueryRow(ctx, `SELECT count(*) FROM series_state`).Scan(&done)
	if done != len(ss) {
		t.Fatalf("after restart %d of %d series evaluated", done, len(ss))
	}
	var l3, distinct int
	_ = d.Pool.QueryRow(ctx, `SELECT count(*), count(DISTINCT series_id) FROM alerts WHERE level = 3`).Scan(&l3, &distinct)
	if l3 != stepped || distinct != stepped {
		t.Fatalf("%d Level 3 alerts on %d series, want one on each of the %d stepped series", l3, distinct, stepped)
	}
	if n := box.count("Level 3"); n != stepped {
		t.Fatalf("%d Level 3 e-mails for %d alerts: notifications lost or doubled", n, stepped)
	}
	var pending int
	_ = d.Pool.QueryRow(ctx, `SELECT count(*) FROM outbox WHERE delivered_at IS NULL`).Scan(&pending)
	if pending != 0 {
		t.Fatalf("%d notifications still pending", pending)
	}
}
